"""Connections for the PostgreSQL store: connection strings, the pool, error mapping and
retries. Part of :mod:`jobkeeper.store.postgres`, so psycopg loads only when a
``postgresql://`` archive is used.

Retries: a transaction that fails because its connection broke (the server restarted, an
operator ran ``pg_terminate_backend``, a network blip) or because PostgreSQL chose it as a
deadlock victim is run again on a fresh connection, within a deadline. Running a store
transaction twice is safe even when the first one committed just before the connection
dropped: every worker write is fenced on its lease token (a second run changes nothing
and reports the lease lost), enqueue deduplicates on the job key, and the rest are
idempotent upserts or conditional updates. Only then does the caller see
:class:`~jobkeeper.exceptions.StoreUnavailable`.
"""

from __future__ import annotations

import os
import random
import select
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import TypeVar
from urllib.parse import quote, urlsplit, urlunsplit

import psycopg
from psycopg import errors as pg_errors
from psycopg import pq
from psycopg import sql as pg_sql
from psycopg.conninfo import conninfo_to_dict, make_conninfo
from psycopg.rows import TupleRow
from psycopg_pool import ConnectionPool, PoolClosed, PoolTimeout

from jobkeeper.exceptions import ConfigError, StoreError, StoreUnavailable
from jobkeeper.store import sql

T = TypeVar("T")
Conn = psycopg.Connection[TupleRow]

#: How long a store call keeps trying to reach the database before it gives up.
RECONNECT_DEADLINE = 30.0
#: Deadlock victims and serialisation failures are retried this many times.
ROLLBACK_RETRIES = 8


def redact(url: str) -> str:
    """The URL or conninfo string with any password replaced by ``***``."""
    if "://" in url:
        parts = urlsplit(url)
        netloc = parts.netloc
        if "@" in netloc:
            userinfo, _, hostinfo = netloc.rpartition("@")
            if ":" in userinfo:
                userinfo = userinfo.split(":", 1)[0] + ":***"
            netloc = f"{userinfo}@{hostinfo}"
        query = "&".join(
            f"{k}=***" if k.lower() == "password" else f"{k}={v}" if sep else k
            for k, sep, v in (item.partition("=") for item in parts.query.split("&") if item)
        )
        return urlunsplit((parts.scheme, netloc, parts.path, query, parts.fragment))
    try:
        params = conninfo_to_dict(url)
    except psycopg.ProgrammingError:
        return "<unparsable connection string>"
    if "password" in params:
        params["password"] = "***"
    return make_conninfo(**{k: str(v) for k, v in params.items()})


def describe(url: str) -> str:
    """Where the archive lives, for messages: ``host:port/dbname`` (never a password)."""
    try:
        params = conninfo_to_dict(url)
    except psycopg.ProgrammingError:
        return redact(url)
    host = str(params.get("host") or os.environ.get("PGHOST") or "localhost")
    port = str(params.get("port") or os.environ.get("PGPORT") or "5432")
    dbname = str(params.get("dbname") or os.environ.get("PGDATABASE") or params.get("user") or "")
    return f"{host}:{port}/{dbname}"


def build_conninfo(url: str) -> str:
    """The URL plus our defaults where it sets none: a connect timeout, TCP keepalives
    (a worker on another machine notices a dead link), and a fallback application name
    (``PGAPPNAME`` or the URL's ``application_name`` win)."""
    try:
        given = conninfo_to_dict(url)
    except psycopg.ProgrammingError as exc:
        raise ConfigError(f"not a usable PostgreSQL URL {redact(url)!r}: {exc}") from None
    extra = {
        "connect_timeout": "10",
        "keepalives": "1",
        "keepalives_idle": "30",
        "keepalives_interval": "10",
        "keepalives_count": "3",
        "fallback_application_name": "jobkeeper",
    }
    return make_conninfo(url, **{k: v for k, v in extra.items() if k not in given})


def scrub(message: str, url: str) -> str:
    """A server or libpq message with the URL's password removed, should it appear."""
    try:
        password = conninfo_to_dict(url).get("password")
    except psycopg.ProgrammingError:
        password = None
    text = str(message).strip()
    for secret in {str(password), quote(str(password))} if password else set():
        text = text.replace(secret, "***")
    return " ".join(text.split())


def _is_rollback(exc: BaseException) -> bool:
    return isinstance(exc, pg_errors.DeadlockDetected | pg_errors.SerializationFailure)


class Database:
    """A small bounded pool and the one way every store call reaches the database."""

    def __init__(
        self,
        url: str,
        *,
        schema: str | None,
        min_size: int,
        max_size: int,
        idle_in_transaction_timeout: float,
    ) -> None:
        self.url = url
        self.conninfo = build_conninfo(url)
        self.where = describe(url)
        self.schema = schema
        self.idle_timeout_ms = max(1, int(idle_in_transaction_timeout * 1000))
        self.pool: ConnectionPool[Conn] = ConnectionPool(
            self.conninfo,
            min_size=min_size,
            max_size=max_size,
            kwargs={"autocommit": True},
            configure=self.configure,
            check=self.check,
            open=False,
            name="jobkeeper",
            timeout=RECONNECT_DEADLINE,
            reconnect_timeout=RECONNECT_DEADLINE * 10,
        )

    @staticmethod
    def check(conn: Conn) -> None:
        """Before a pooled connection is handed out: refuse one the server has ended. An
        idle connection (ours never LISTEN) has nothing to read unless the server sent
        its goodbye (terminated backend, restart) and closed it; the test costs no round
        trip, unlike a probe query."""
        if conn.closed or conn.broken:
            raise psycopg.OperationalError("the connection is closed")
        readable, _, _ = select.select([conn.fileno()], [], [], 0)
        if readable:
            conn.close()  # so the pool discards it (an open one would be handed out again)
            raise psycopg.OperationalError("the server ended this session")

    def configure(self, conn: Conn) -> None:
        """Session settings for every new connection: a transaction left idle (a stuck or
        stopped client) is ended by the server and its row locks freed, and the schema."""
        conn.execute(pg_sql.SQL(sql.PG_IDLE_TIMEOUT).format(pg_sql.Literal(self.idle_timeout_ms)))
        if self.schema is not None:
            conn.execute(pg_sql.SQL(sql.PG_SEARCH_PATH).format(pg_sql.Identifier(self.schema)))

    def connect(self) -> Conn:
        """One connection outside the pool (migrations, listening), configured alike."""
        with self.map_errors("cannot connect"):
            conn = psycopg.connect(self.conninfo, autocommit=True)
            try:
                self.configure(conn)
            except psycopg.Error:
                conn.close()
                raise
        return conn

    @contextmanager
    def map_errors(self, what: str) -> Iterator[None]:
        """The store's edge: a psycopg or pool error raised inside becomes one of ours,
        its message scrubbed of the URL's password. Connection trouble (the server is
        down, unreachable, restarting, or ended our session) is StoreUnavailable (exit 3);
        anything else the database refuses is a StoreError."""
        try:
            yield
        except PoolTimeout:
            raise StoreUnavailable(
                f"no connection to the PostgreSQL archive at {self.where} within "
                f"{RECONNECT_DEADLINE:.0f} s (is the server running and reachable?)"
            ) from None
        except PoolClosed:
            raise StoreUnavailable(
                f"the store of the PostgreSQL archive at {self.where} is closed"
            ) from None
        except _CONNECTION_TROUBLE as exc:
            raise self.unavailable(exc) from None
        except psycopg.Error as exc:
            raise StoreError(
                f"{what} (PostgreSQL archive at {self.where}): {scrub(str(exc), self.url)}"
            ) from None

    def open(self) -> None:
        with self.map_errors("cannot open the connection pool"):
            self.pool.open(wait=False)

    def close(self) -> None:
        with self.map_errors("cannot close the connection pool"):
            self.pool.close()

    def unavailable(self, exc: BaseException) -> StoreUnavailable:
        return StoreUnavailable(
            f"cannot use the PostgreSQL archive at {self.where}: {scrub(str(exc), self.url)}"
        )

    def run(self, work: Callable[[Conn], T], *, write: bool) -> T:
        """Run ``work`` on a pooled connection: in one transaction when ``write``, else in
        autocommit (single reads hold no transaction open). Retried as the module
        docstring says; psycopg errors come out as our own."""
        deadline = time.monotonic() + RECONNECT_DEADLINE
        broken = rolled_back = 0
        while True:
            try:
                with self.map_errors("archive error"), self.pool.connection() as conn:
                    try:
                        if write:
                            with conn.transaction():
                                return work(conn)
                        return work(conn)
                    except psycopg.Error as exc:
                        if _is_rollback(exc):
                            raise _Retry(exc) from exc
                        if not _in_doubt(conn, exc):
                            raise
                        # Never hand a connection in doubt back to the pool: one cut in
                        # pipeline mode can look alive ("cannot exit pipeline mode while
                        # busy") yet be unusable.
                        conn.close()
                        raise _Broken(exc) from exc
            except _Retry as again:
                if rolled_back >= ROLLBACK_RETRIES:
                    raise StoreError(
                        f"archive error at {self.where}: gave up after {rolled_back} "
                        f"retries: {scrub(str(again.cause), self.url)}"
                    ) from None
                rolled_back += 1
                time.sleep(random.uniform(0.0, 0.01 * rolled_back))
            except _Broken as wrapped:
                # The pool may hold more dead connections (all of this process's were
                # terminated): try again at once a few times, then back off.
                broken += 1
                if time.monotonic() > deadline:
                    raise self.unavailable(wrapped.cause) from None
                if broken > self.pool.max_size:
                    time.sleep(min(2.0, 0.05 * 2 ** min(broken - self.pool.max_size, 6)))


_CONNECTION_TROUBLE = (
    psycopg.OperationalError,
    psycopg.InterfaceError,
    pg_errors.IdleInTransactionSessionTimeout,
)


def _in_doubt(conn: Conn, exc: psycopg.Error) -> bool:
    """Whether the connection may be dead or unusable after ``exc``: it says so, the
    error is about the connection or the server (operational, interface), or the session
    was ended by the server (an idle transaction timed out, an administrator)."""
    return (
        conn.broken
        or conn.closed
        or isinstance(exc, _CONNECTION_TROUBLE)
        or conn.info.transaction_status
        in (pq.TransactionStatus.ACTIVE, pq.TransactionStatus.UNKNOWN)
    )


class _Broken(Exception):
    """The connection broke under a transaction: run it again on a fresh one."""

    def __init__(self, cause: psycopg.Error) -> None:
        super().__init__(str(cause))
        self.cause = cause


class _Retry(_Broken):
    """PostgreSQL rolled the transaction back (deadlock victim, serialisation failure):
    run it again after a short random pause, on the same healthy pool."""
