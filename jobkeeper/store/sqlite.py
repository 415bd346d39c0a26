"""The SQLite store: the embedded default, one database file in the keep directory.

Durability: WAL with ``synchronous=FULL``, so a committed result survives power loss (the
WAL is synced at every commit; ``NORMAL`` would only survive a crash of the process).
Every write transaction starts with ``BEGIN IMMEDIATE``: a deferred transaction that
later writes fails with "database is locked" at once, whatever the busy timeout.

Locking fairness: SQLite's own busy handler sleeps in growing steps, and a writer that
keeps coming back can starve another for seconds. We keep SQLite's handler short and
retry ourselves with small random sleeps, so waiting writers get their turn at random.
"""

from __future__ import annotations

import json
import random
import sqlite3
import threading
import time
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import sqlite_utils

from jobkeeper.exceptions import (
    ConfigError,
    LeaseLost,
    StoreUnavailable,
)
from jobkeeper.store import (
    Claim,
    ComparisonRecord,
    Completion,
    JobRecord,
    LogAppender,
    NewJob,
    result_row,
)
from jobkeeper.store import _sql as sql
from jobkeeper.store._reads import StoreReads, record_of

NOW = "((julianday('now') - 2440587.5) * 86400.0)"
BUSY_DEADLINE_SECONDS = 60.0


def _q(statement: str, **extra: str) -> str:
    return (
        statement.replace("{now}", NOW).format(**extra)
        if extra
        else statement.replace("{now}", NOW)
    )


_FINISH = _q(sql.FINISH)
_INSERT_RESULT = _q(sql.INSERT_RESULT)
_INSERT_LOG_ENTRY = _q(sql.INSERT_LOG_ENTRY)


class SqliteStore(StoreReads):
    """The archive in one SQLite file. Safe for several processes on one machine (not on a
    network file system); one connection per store object, used by one thread at a time."""

    def __init__(self, path: Path, *, create: bool = True) -> None:
        self.path = Path(path)
        self.location = str(self.path)
        if not self.path.exists() and not create:
            raise StoreUnavailable(f"no archive at {self.path} (run 'jobkeeper init' first)")
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            conn = sqlite3.connect(
                self.path, timeout=0.05, isolation_level=None, check_same_thread=False
            )
            conn.execute("PRAGMA journal_mode=WAL")
            conn.execute("PRAGMA synchronous=FULL")
            conn.execute("PRAGMA foreign_keys=ON")
        except (OSError, sqlite3.Error) as exc:
            raise StoreUnavailable(f"cannot open the archive at {self.path}: {exc}") from exc
        self._conn = conn
        self._db = sqlite_utils.Database(conn)
        self._lock = threading.RLock()
        self._migrate()

    # -- plumbing -----------------------------------------------------------------------

    @contextmanager
    def _write(self, *, durable: bool = True) -> Iterator[sqlite3.Connection]:
        """One write transaction, opened with BEGIN IMMEDIATE, retried on a busy database
        with short random sleeps until a deadline.

        ``durable=False`` skips the sync at commit, for writes whose loss on power failure
        only sends a job back to the queue (claims, lease renewals, rescues). In WAL mode
        the next synced commit syncs every earlier frame too, so nothing is reordered."""
        with self._lock:
            if not durable:
                self._conn.execute("PRAGMA synchronous=NORMAL")
            try:
                self._begin()
                try:
                    yield self._conn
                except BaseException:
                    self._conn.execute("ROLLBACK")
                    raise
                self._commit()
            finally:
                if not durable:
                    self._conn.execute("PRAGMA synchronous=FULL")

    def _begin(self) -> None:
        deadline = time.monotonic() + BUSY_DEADLINE_SECONDS
        while True:
            try:
                self._conn.execute("BEGIN IMMEDIATE")
                return
            except sqlite3.OperationalError as exc:
                if "locked" not in str(exc) and "busy" not in str(exc):
                    raise StoreUnavailable(f"archive error: {exc}") from exc
                if time.monotonic() > deadline:
                    raise StoreUnavailable(
                        f"the archive at {self.path} stayed locked for "
                        f"{BUSY_DEADLINE_SECONDS:.0f} s"
                    ) from exc
                time.sleep(random.uniform(0.0005, 0.004))

    def _commit(self) -> None:
        deadline = time.monotonic() + BUSY_DEADLINE_SECONDS
        while True:
            try:
                self._conn.execute("COMMIT")
                return
            except sqlite3.OperationalError as exc:
                if "locked" not in str(exc) and "busy" not in str(exc):
                    self._conn.execute("ROLLBACK")
                    raise StoreUnavailable(f"archive error: {exc}") from exc
                if time.monotonic() > deadline:
                    self._conn.execute("ROLLBACK")
                    raise StoreUnavailable(f"the archive at {self.path} stayed locked") from exc
                time.sleep(random.uniform(0.0005, 0.004))

    def _read(self, statement: str, params: Sequence[Any] = ()) -> list[Any]:
        deadline = time.monotonic() + BUSY_DEADLINE_SECONDS
        with self._lock:
            while True:
                try:
                    return self._conn.execute(_q(statement), params).fetchall()
                except sqlite3.OperationalError as exc:
                    if "locked" not in str(exc) or time.monotonic() > deadline:
                        raise StoreUnavailable(f"archive error: {exc}") from exc
                    time.sleep(random.uniform(0.0005, 0.004))

    def _migrate(self) -> None:
        try:
            with self._write() as conn:
                conn.execute("CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT)")
                row = conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
                version = int(row[0]) if row else 0
                if version > sql.SCHEMA_VERSION:
                    raise ConfigError(
                        f"the archive at {self.path} has schema version {version}, newer than "
                        f"this jobkeeper understands ({sql.SCHEMA_VERSION}); upgrade jobkeeper"
                    )
                for step in sql.MIGRATIONS[version:]:
                    for statement in step:
                        conn.execute(statement.replace("BYTEA", "BLOB"))
                conn.execute(
                    "INSERT INTO meta (key, value) VALUES ('schema_version', ?) "
                    "ON CONFLICT (key) DO UPDATE SET value = excluded.value",
                    (str(sql.SCHEMA_VERSION),),
                )
        except sqlite3.Error as exc:
            raise StoreUnavailable(f"cannot prepare the archive at {self.path}: {exc}") from exc

    # -- queue ----------------------------------------------------------------------------

    def now(self) -> float:
        return float(self._read(f"SELECT {NOW}")[0][0])

    def enqueue(self, jobs: Sequence[NewJob]) -> list[tuple[JobRecord, bool]]:
        out: list[tuple[JobRecord, bool]] = []
        with self._write() as conn:
            for job in jobs:
                row = conn.execute(
                    _q(sql.INSERT_JOB),
                    (job.id, job.job_key, job.backend, job.shots, job.seed, job.repeat,
                     job.label, json.dumps(dict(job.spec), sort_keys=True), job.max_attempts,
                     job.cost),
                ).fetchone()  # fmt: skip
                if row is not None:
                    out.append((record_of(row), True))
                    continue
                existing = conn.execute(sql.SELECT_LIVE_BY_KEY, (job.job_key,)).fetchone()
                out.append((record_of(existing), False))
        return out

    def claim(
        self,
        owner: str,
        *,
        limit: int,
        lease_seconds: float,
        backends: Sequence[str] | None = None,
        ids: Sequence[str] | None = None,
    ) -> list[Claim]:
        if limit <= 0:
            return []
        params: list[Any] = [owner, lease_seconds]
        backend_filter = ""
        for column, values in (("backend", backends), ("id", ids)):
            if values is None:
                continue
            if not values:
                return []
            backend_filter += f" AND {column} IN ({', '.join('?' for _ in values)})"
            params.extend(values)
        params.append(limit)
        statement = _q(sql.CLAIM, backend_filter=backend_filter, lock="")
        with self._write(durable=False) as conn:
            rows = conn.execute(statement, params).fetchall()
        claims = [record_of(row) for row in rows]
        claims.sort(key=lambda job: job.not_before)
        return [
            Claim(job=job, token=job.lease_token, was="waiting" if job.handle else "queued")
            for job in claims
        ]

    def renew(
        self, owner: str, leases: Sequence[tuple[str, int]], lease_seconds: float
    ) -> set[str]:
        held: set[str] = set()
        with self._write(durable=False) as conn:
            for job_id, token in leases:
                cur = conn.execute(_q(sql.RENEW), (lease_seconds, job_id, token, owner))
                if cur.rowcount == 1:
                    held.add(job_id)
        return held

    def _fenced(self, statement: str, params: Sequence[Any], job_id: str) -> None:
        with self._write() as conn:
            if conn.execute(_q(statement), params).rowcount != 1:
                raise LeaseLost(f"job {job_id}: lease lost, another worker holds it now")

    def record_handle(self, job_id: str, token: int, handle: str, poll_after: float) -> None:
        self._fenced(sql.RECORD_HANDLE, (handle, poll_after, job_id, token), job_id)

    def snooze(self, job_id: str, token: int, poll_after: float) -> None:
        self._fenced(sql.SNOOZE, (poll_after, job_id, token), job_id)

    def retry(self, job_id: str, token: int, error_class: str, message: str, delay: float) -> str:
        with self._write() as conn:
            inserted = conn.execute(
                _q(sql.INSERT_ATTEMPT), (error_class, message, delay, job_id, token)
            ).rowcount
            row = conn.execute(_q(sql.RETRY), (message, delay, job_id, token)).fetchone()
            if inserted != 1 or row is None:
                raise LeaseLost(f"job {job_id}: lease lost, another worker holds it now")
            return str(row[0])

    def fail(self, job_id: str, token: int, error_class: str, message: str) -> None:
        with self._write() as conn:
            inserted = conn.execute(
                _q(sql.INSERT_ATTEMPT), (error_class, message, None, job_id, token)
            ).rowcount
            if inserted != 1 or conn.execute(_q(sql.FAIL), (message, job_id, token)).rowcount != 1:
                raise LeaseLost(f"job {job_id}: lease lost, another worker holds it now")

    def finish(self, completions: Sequence[Completion], appender: LogAppender) -> list[bool]:
        rows = [result_row(item) for item in completions]
        done: list[bool] = []
        with self._write() as conn:
            accepted: list[Completion] = []
            accepted_rows = []
            for item, row in zip(completions, rows, strict=True):
                ok = conn.execute(_FINISH, (item.job_id, item.token)).rowcount == 1
                done.append(ok)
                if ok:
                    accepted.append(item)
                    accepted_rows.append(row)
            if accepted:
                conn.executemany(_INSERT_RESULT, accepted_rows)
                self._append_log(
                    conn, [(c.job_id, c.envelope, c.signer) for c in accepted], appender
                )
        return done

    def record_comparison(
        self, comparison: ComparisonRecord, envelope: bytes, signer: str, appender: LogAppender
    ) -> None:
        c = comparison
        with self._write() as conn:
            conn.execute(
                _q(sql.INSERT_COMPARISON), (c.id, c.kind, c.job_a, c.job_b, c.verdict, c.report)
            )
            self._append_log(conn, [(c.id, envelope, signer)], appender)

    def _append_log(
        self,
        conn: sqlite3.Connection,
        items: Sequence[tuple[str, bytes, str]],
        appender: LogAppender,
    ) -> None:
        row = conn.execute("SELECT size, state FROM log_state WHERE id = 1").fetchone()
        size, state = (int(row[0]), bytes(row[1])) if row else (0, None)
        leaves, new_state, root, note = appender(state, size, [env for _, env, _ in items])
        conn.executemany(
            _INSERT_LOG_ENTRY,
            [
                (size + offset, subject, envelope, leaf, signer)
                for offset, ((subject, envelope, signer), leaf) in enumerate(
                    zip(items, leaves, strict=True)
                )
            ],
        )
        new_size = size + len(items)
        conn.execute(
            "INSERT INTO log_state (id, size, state) VALUES (1, ?, ?) "
            "ON CONFLICT (id) DO UPDATE SET size = excluded.size, state = excluded.state",
            (new_size, new_state),
        )
        conn.execute(
            _q("INSERT INTO checkpoints (size, root, note, created_at) VALUES (?, ?, ?, {now})"),
            (new_size, root, note),
        )

    def release(self, owner: str, leases: Sequence[tuple[str, int]]) -> None:
        with self._write(durable=False) as conn:
            for job_id, token in leases:
                conn.execute(_q(sql.RELEASE), (job_id, token, owner))

    def requeue_expired(self) -> int:
        with self._write(durable=False) as conn:
            return int(conn.execute(_q(sql.REQUEUE_EXPIRED)).rowcount)

    def request_cancel(self, job_id: str) -> JobRecord:
        with self._write() as conn:
            if conn.execute(_q(sql.CANCEL_QUEUED), (job_id,)).rowcount == 0:
                conn.execute(_q(sql.REQUEST_CANCEL), (job_id,))
        return self.get(job_id)

    def mark_cancelled(self, job_id: str, token: int) -> None:
        self._fenced(sql.MARK_CANCELLED, (job_id, token), job_id)

    # -- reading --------------------------------------------------------------------------

    def register_key(self, fingerprint: str, public_key_b64: str) -> None:
        with self._write() as conn:
            conn.execute(
                _q("INSERT INTO public_keys (fingerprint, public_key, created_at) "
                   "VALUES (?, ?, {now}) ON CONFLICT (fingerprint) DO NOTHING"),
                (fingerprint, public_key_b64),
            )  # fmt: skip

    def set_meta(self, key: str, value: str) -> None:
        with self._write() as conn:
            conn.execute(
                "INSERT INTO meta (key, value) VALUES (?, ?) "
                "ON CONFLICT (key) DO UPDATE SET value = excluded.value",
                (key, value),
            )

    def ensure_meta(self, key: str, value: str) -> str:
        with self._write() as conn:
            conn.execute(
                "INSERT INTO meta (key, value) VALUES (?, ?) ON CONFLICT (key) DO NOTHING",
                (key, value),
            )
            row = conn.execute("SELECT value FROM meta WHERE key = ?", (key,)).fetchone()
        return str(row[0])

    def close(self) -> None:
        with self._lock:
            self._conn.close()

    def __enter__(self) -> SqliteStore:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
