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

import contextlib
import sqlite3
import threading
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from functools import partial
from pathlib import Path
from typing import Any

from jobkeeper.exceptions import (
    ConfigError,
    LeaseLost,
    StoreError,
    StoreFault,
    StoreUnavailable,
)
from jobkeeper.queue import JobState
from jobkeeper.store import (
    BatchIncomplete,
    Claim,
    ComparisonRecord,
    Completion,
    JobRecord,
    LogAppender,
    NewJob,
    TryInCall,
    job_row,
    labelled,
    result_row,
    sql,
)
from jobkeeper.store.reads import StoreReads, claim_filter, claims_of, record_of
from jobkeeper.store.sqlite_edge import (
    connect_read_only,
    disk_refused,
    full_disk_shm,
    map_errors,
    patiently,
    refuse_emptied,
    writable,
)
from jobkeeper.store.sqlite_schema import check_migrated, sqlite_dialect
from jobkeeper.store.sweep_records import NewSweep, point_rows, sweep_row

NOW = sql.SQLITE_NOW


def _q(statement: str, **extra: str) -> str:
    """A statement of :mod:`jobkeeper.store.sql` in SQLite's dialect, its slots filled."""
    text = statement.replace("{now}", NOW).replace("{labels}", sql.SQLITE_LABELS)
    return text.format(**extra) if extra else text


_FINISH = _q(sql.FINISH)
_INSERT_RESULT = _q(sql.INSERT_RESULT)
_INSERT_LOG_ENTRY = _q(sql.INSERT_LOG_ENTRY)
_INSERT_JOB = _q(sql.INSERT_JOB)
_SELECT_LIVE_BY_KEY = _q(sql.SELECT_LIVE_BY_KEY)
_ADD_LABEL = _q(sql.ADD_LABEL)
_INSERT_TRY_IN_CALL = _q(sql.INSERT_TRY_IN_CALL)
_INSERT_SWEEP = _q(sql.INSERT_SWEEP)


def _in_list(column: str, values: Sequence[str]) -> tuple[str, list[Any]]:
    return f"{column} IN ({', '.join('?' for _ in values)})", list(values)


class SqliteStore(StoreReads):
    """The archive in one SQLite file. Safe for several processes on one machine (not on a
    network file system); one connection per store object, used by one thread at a time."""

    _listing_hint = sql.SQLITE_LISTING_HINT

    def __init__(self, path: Path, *, create: bool = True) -> None:
        self.path = Path(path)
        self.location = str(self.path)
        self._where = f"the archive at {self.path}"
        if not self.path.exists() and not create:
            raise StoreUnavailable(f"no archive at {self.path} (run 'jobkeeper init' first)")
        refuse_emptied(self.path)
        #: Opened for reading only: the file or its directory cannot be written here (a
        #: read-only mount, a keep another user owns). Every read works; a write is a
        #: StoreFault that says so.
        self.read_only = self.path.exists() and not writable(self.path)
        self._refusal = (
            f"cannot write {self._where}: it is read-only here (it can be read: jobs, show, "
            "counts, verify, bundle, export); no job was marked failed for it"
        )
        if not self.read_only:
            try:
                self.path.parent.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise StoreUnavailable(f"cannot open the archive at {self.path}: {exc}") from exc
        self._lock = threading.RLock()
        try:
            self._conn = self._connect()
            self._migrate()
        except StoreFault as fault:
            if self.read_only or not self.path.exists() or not disk_refused(fault):
                raise
            try:
                self._only_read(fault)
                self._migrate()
            except StoreError:
                raise fault from None

    def _only_read(self, fault: StoreFault) -> None:
        """A disk too full (or failing) to open the archive for writing may still let it
        be read: from now on reads are served read-only, and every write meets ``fault``."""
        with contextlib.suppress(AttributeError, sqlite3.Error):
            self._conn.close()
        self.read_only, self._refusal = True, str(fault)
        self._conn = self._connect()

    def _connect(self) -> sqlite3.Connection:
        with map_errors(f"cannot open the archive at {self.path}", self.path.parent):
            if self.read_only:
                return connect_read_only(self.path)
            conn = sqlite3.connect(
                self.path, timeout=0.05, isolation_level=None, check_same_thread=False
            )
            for pragma in sql.SQLITE_OPEN:
                patiently(partial(conn.execute, pragma), what=self._where)
            return conn

    # -- plumbing -----------------------------------------------------------------------

    @contextmanager
    def _write(self, *, durable: bool = True) -> Iterator[sqlite3.Connection]:
        """One write transaction, opened with BEGIN IMMEDIATE, retried on a busy database
        with short random sleeps until a deadline. Any driver error inside the block
        rolls the transaction back and comes out as one of ours.

        ``durable=False`` skips the sync at commit, for writes whose loss on power failure
        only sends a job back to the queue (claims, lease renewals, rescues). In WAL mode
        the next synced commit syncs every earlier frame too, so nothing is reordered."""
        with self._lock, map_errors(f"cannot write {self._where}", self.path.parent):
            if self.read_only:
                raise StoreFault(self._refusal)
            conn = self._conn
            if not durable:
                conn.execute(sql.SQLITE_SYNC_NORMAL)
            try:
                patiently(lambda: conn.execute(sql.SQLITE_BEGIN), what=self._where)
                try:
                    yield conn
                    patiently(lambda: conn.execute(sql.SQLITE_COMMIT), what=self._where)
                except BaseException:
                    self._undo(conn)
                    raise
            finally:
                if not durable and self._conn is conn:
                    conn.execute(sql.SQLITE_SYNC_FULL)

    def _undo(self, conn: sqlite3.Connection) -> None:
        """Roll back what a failed write began. SQLite may have rolled it back itself (a
        full disk or an I/O error can end the transaction: sqlite.org/lang_transaction.html),
        so only a transaction still open is rolled back; and a rollback that fails too must
        neither hide the first error nor leave a half-open transaction behind for the next
        write: the connection is then closed (which rolls back) and opened afresh."""
        if not conn.in_transaction:
            return
        try:
            conn.execute(sql.SQLITE_ROLLBACK)
        except sqlite3.Error:
            with contextlib.suppress(sqlite3.Error):
                conn.close()
            with contextlib.suppress(StoreError):
                self._conn = self._connect()

    def _read(self, statement: str, params: Sequence[Any] = (), **extra: str) -> list[Any]:
        try:
            return self._read_once(statement, params, **extra)
        except StoreFault as fault:
            if self.read_only or not full_disk_shm(fault, self.path.parent):
                raise
            with self._lock:
                self._only_read(fault)
            return self._read_once(statement, params, **extra)

    def _read_once(self, statement: str, params: Sequence[Any], **extra: str) -> list[Any]:
        text = _q(statement, **extra)
        with self._lock, map_errors(f"archive error at {self.path}", self.path.parent):
            rows: list[Any] = patiently(
                lambda: self._conn.execute(text, params).fetchall(), what=self._where
            )
            return rows

    def _migrate(self) -> None:
        if self.read_only:
            self._check_version()
            return
        with self._write() as conn:
            conn.execute(sql.CREATE_META)
            row = conn.execute(sql.GET_META, ("schema_version",)).fetchone()
            version = int(row[0]) if row else 0
            if version > sql.SCHEMA_VERSION:
                raise ConfigError(
                    f"the archive at {self.path} has schema version {version}, newer than "
                    f"this jobkeeper understands ({sql.SCHEMA_VERSION}); upgrade jobkeeper"
                )
            if version == sql.SCHEMA_VERSION:
                return
            for step in sql.MIGRATIONS[version:]:
                for statement in step:
                    conn.execute(sqlite_dialect(statement))
            if version > 0:  # an archive that held rows: check what the steps made of it
                check_migrated(conn, where=str(self.path), found=version)
            conn.execute(sql.SET_META, ("schema_version", str(sql.SCHEMA_VERSION)))

    def _check_version(self) -> None:
        """A read-only archive cannot be migrated: it is read as it is, if it is current."""
        rows = self._read(sql.GET_META, ("schema_version",))
        version = int(rows[0][0]) if rows else 0
        if version != sql.SCHEMA_VERSION:
            raise StoreFault(
                f"{self._where} is read-only here and has schema version {version}, but this "
                f"jobkeeper reads {sql.SCHEMA_VERSION}: open it once where it can be written"
            )

    # -- queue ----------------------------------------------------------------------------

    def now(self) -> float:
        return float(self._read(sql.CLOCK)[0][0])

    def enqueue(self, jobs: Sequence[NewJob]) -> list[tuple[JobRecord, bool]]:
        with self._write() as conn:
            return self._enqueue(conn, jobs)

    def _enqueue(
        self, conn: sqlite3.Connection, jobs: Sequence[NewJob]
    ) -> list[tuple[JobRecord, bool]]:
        out: list[tuple[JobRecord, bool]] = []
        for job in jobs:
            row = conn.execute(_INSERT_JOB, job_row(job)).fetchone()
            created = row is not None
            if not created:  # a live or done job has the key: that job is the answer
                row = conn.execute(_SELECT_LIVE_BY_KEY, (job.job_key,)).fetchone()
            record = record_of(row)
            if job.labels:
                conn.executemany(_ADD_LABEL, [(record.id, label) for label in job.labels])
            out.append((labelled(record, job.labels), created))
        return out

    def enqueue_sweep(
        self, sweep: NewSweep, jobs: Sequence[NewJob]
    ) -> tuple[str, list[tuple[JobRecord, bool]]]:
        with self._write() as conn:
            out = self._enqueue(conn, jobs)
            conn.execute(_INSERT_SWEEP, sweep_row(sweep))
            sweep_id = str(conn.execute(sql.SWEEP_ID_BY_KEY, (sweep.sweep_key,)).fetchone()[0])
            ids = [record.id for record, _ in out]
            conn.executemany(sql.UPSERT_SWEEP_POINT, point_rows(sweep_id, sweep.points, ids))
        return sweep_id, out

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
        limited = claim_filter(backends, ids, _in_list)
        if limited is None:
            return []
        condition, filter_params = limited
        params = [owner, lease_seconds, *filter_params, limit]
        statement = _q(sql.CLAIM, backend_filter=condition, lock="")
        with self._write(durable=False) as conn:
            rows = conn.execute(statement, params).fetchall()
        return claims_of([record_of(row) for row in rows])

    def claim_batch(
        self,
        owner: str,
        *,
        limit: int,
        lease_seconds: float,
        backends: Sequence[str] | None = None,
        ids: Sequence[str] | None = None,
    ) -> list[Claim]:
        limited = claim_filter(backends, ids, _in_list) if limit > 0 else None
        if limited is None:
            return []
        condition, filter_params = limited
        # Looked up outside the write lock: a keep without due sweep points (most claims)
        # pays one indexed read, not a write transaction.
        found = self._read(sql.BATCH_SWEEP, filter_params, backend_filter=condition)
        if not found:
            return []
        with self._write(durable=False) as conn:
            params = [owner, lease_seconds, found[0][0], *filter_params, limit]
            rows = conn.execute(_q(sql.CLAIM_BATCH, backend_filter=condition, lock=""), params)
            claimed = rows.fetchall()
        return claims_of([record_of(row) for row in claimed])

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

    def retry(
        self, job_id: str, token: int, error_class: str, message: str, delay: float
    ) -> JobState:
        with self._write() as conn:
            inserted = conn.execute(
                _q(sql.INSERT_ATTEMPT), (error_class, message, delay, job_id, token)
            ).rowcount
            row = conn.execute(_q(sql.RETRY), (message, delay, job_id, token)).fetchone()
            if inserted != 1 or row is None:
                raise LeaseLost(f"job {job_id}: lease lost, another worker holds it now")
            return JobState(row[0])

    def fail(self, job_id: str, token: int, error_class: str, message: str) -> None:
        with self._write() as conn:
            inserted = conn.execute(
                _q(sql.INSERT_ATTEMPT), (error_class, message, None, job_id, token)
            ).rowcount
            if inserted != 1 or conn.execute(_q(sql.FAIL), (message, job_id, token)).rowcount != 1:
                raise LeaseLost(f"job {job_id}: lease lost, another worker holds it now")

    def record_tries(self, job_id: str, token: int, tries: Sequence[TryInCall]) -> None:
        if not tries:
            return
        with self._write() as conn:
            for item in tries:
                params = (item.seconds_ago, item.error_class, item.message, job_id, token)
                if conn.execute(_INSERT_TRY_IN_CALL, params).rowcount != 1:
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

    def finish_batch(
        self, batch_id: str, completions: Sequence[Completion], envelope: bytes, signer: str,
        appender: LogAppender,
    ) -> list[bool]:  # fmt: skip
        rows = [result_row(item) for item in completions]
        held: list[bool] = []
        # BatchIncomplete rolls the transaction back: ``held`` says why.
        with contextlib.suppress(BatchIncomplete), self._write() as conn:
            held = [conn.execute(_FINISH, (c.job_id, c.token)).rowcount == 1
                        for c in completions]  # fmt: skip
            if not all(held):
                raise BatchIncomplete  # rolls the transaction back
            conn.executemany(_INSERT_RESULT, rows)
            conn.executemany(sql.INSERT_BATCH_POINT, [(c.job_id, batch_id) for c in completions])
            self._append_log(conn, [(batch_id, envelope, signer)], appender)
        return held

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
        row = conn.execute(sql.READ_LOG_STATE).fetchone()
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
        conn.execute(sql.SAVE_LOG_STATE, (new_size, new_state))
        conn.execute(_q(sql.INSERT_CHECKPOINT), (new_size, root, note))

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
            conn.execute(_q(sql.REGISTER_KEY), (fingerprint, public_key_b64))

    def set_meta(self, key: str, value: str) -> None:
        with self._write() as conn:
            conn.execute(sql.SET_META, (key, value))

    def ensure_meta(self, key: str, value: str) -> str:
        with self._write() as conn:
            conn.execute(sql.ENSURE_META, (key, value))
            row = conn.execute(sql.GET_META, (key,)).fetchone()
        return str(row[0])

    def close(self) -> None:
        with self._lock, map_errors(f"cannot close the archive at {self.path}", self.path.parent):
            self._conn.close()

    def __enter__(self) -> SqliteStore:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
