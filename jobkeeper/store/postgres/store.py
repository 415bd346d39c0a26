"""The PostgreSQL store itself; see the package docstring for how it works."""

from __future__ import annotations

import contextlib
from collections.abc import Sequence
from typing import Any

import psycopg

from jobkeeper.exceptions import LeaseLost
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
from jobkeeper.store.postgres.database import Conn, Database, redact
from jobkeeper.store.postgres.dialect import dialect, each_row, translate
from jobkeeper.store.postgres.migrations import migrate
from jobkeeper.store.reads import StoreReads, claim_filter, claims_of
from jobkeeper.store.reads import record_of as _record
from jobkeeper.store.sweep_records import NewSweep, point_rows, sweep_row

WAKE_CHANNEL = sql.PG_WAKE_CHANNEL


def _lost(job_id: str) -> LeaseLost:
    return LeaseLost(f"job {job_id}: lease lost, another worker holds it now")


class PostgresStore(StoreReads):
    """The archive in a PostgreSQL database. Safe for many processes on many machines;
    one store object may be used from several threads (each call takes a pooled
    connection for its own transaction)."""

    def __init__(
        self,
        url: str,
        *,
        create: bool = True,
        schema: str | None = None,
        min_connections: int = 1,
        max_connections: int = 4,
        idle_in_transaction_timeout: float = 30.0,
    ) -> None:
        self.location = redact(url) + (f" (schema {schema})" if schema else "")
        self.schema = schema
        self._db = Database(
            url, schema=schema, min_size=min_connections, max_size=max_connections,
            idle_in_transaction_timeout=idle_in_transaction_timeout,
        )  # fmt: skip
        migrate(self._db, create=create)
        self._db.open()
        self._listener: Conn | None = None

    # -- plumbing -------------------------------------------------------------------------

    def _read(self, statement: str, params: Sequence[Any] = (), **extra: str) -> list[Any]:
        # Single autocommit statements on a pooled connection: no transaction held open.
        query = translate(statement, **extra).encode() if extra else dialect(statement)

        def work(conn: Conn) -> list[Any]:
            return conn.execute(query, params).fetchall()

        return self._db.run(work, write=False)

    def _fenced(self, statement: str, params: Sequence[Any], job_id: str) -> None:
        def work(conn: Conn) -> None:
            if conn.execute(dialect(statement), params).rowcount != 1:
                raise _lost(job_id)

        self._db.run(work, write=True)

    # -- queue ----------------------------------------------------------------------------

    def now(self) -> float:
        return float(self._read(sql.CLOCK)[0][0])

    def enqueue(self, jobs: Sequence[NewJob]) -> list[tuple[JobRecord, bool]]:
        if not jobs:
            return []
        return self._db.run(lambda conn: self._enqueue(conn, jobs), write=True)

    def enqueue_sweep(
        self, sweep: NewSweep, jobs: Sequence[NewJob]
    ) -> tuple[str, list[tuple[JobRecord, bool]]]:
        def work(conn: Conn) -> tuple[str, list[tuple[JobRecord, bool]]]:
            out = self._enqueue(conn, jobs)
            conn.execute(dialect(sql.INSERT_SWEEP), sweep_row(sweep))
            row = conn.execute(dialect(sql.SWEEP_ID_BY_KEY), (sweep.sweep_key,)).fetchone()
            assert row is not None  # inserted above, or there already
            sweep_id = str(row[0])
            ids = [record.id for record, _ in out]
            with conn.cursor() as cur:
                cur.executemany(
                    dialect(sql.UPSERT_SWEEP_POINT), point_rows(sweep_id, sweep.points, ids)
                )
            return sweep_id, out

        return self._db.run(work, write=True)

    def _enqueue(self, conn: Conn, jobs: Sequence[NewJob]) -> list[tuple[JobRecord, bool]]:
        rows = [job_row(job) for job in jobs]
        out: list[tuple[JobRecord, bool]] = []
        # Each INSERT … ON CONFLICT DO NOTHING returns its row, or none when a live
        # job has the key.
        inserted = each_row(conn, dialect(sql.INSERT_JOB), rows)
        for job, row in zip(jobs, inserted, strict=True):
            if row is not None:
                out.append((_record(row), True))
                continue
            out.append((self._existing_or_insert(conn, job), False))
        labels = [
            (r.id, label) for (r, _), job in zip(out, jobs, strict=True) for label in job.labels
        ]
        if labels:
            with conn.cursor() as cur:
                cur.executemany(dialect(sql.ADD_LABEL), labels)
        if any(created for _, created in out):
            conn.execute(dialect(sql.PG_NOTIFY), (WAKE_CHANNEL,))
        return [(labelled(r, job.labels), made) for (r, made), job in zip(out, jobs, strict=True)]

    def _existing_or_insert(self, conn: Conn, job: NewJob) -> JobRecord:
        existing = conn.execute(dialect(sql.SELECT_LIVE_BY_KEY), (job.job_key,)).fetchone()
        if existing is None:
            # The conflicting job left the keyed states between our insert and this read
            # (cancelled or failed meanwhile): the key is free again, so insert ours.
            row = conn.execute(dialect(sql.INSERT_JOB), job_row(job)).fetchone()
            if row is not None:
                return _record(row)
            existing = conn.execute(dialect(sql.SELECT_LIVE_BY_KEY), (job.job_key,)).fetchone()
            if existing is None:  # pragma: no cover - would need two flips in one statement
                raise psycopg.errors.SerializationFailure("job key kept changing; try again")
        return _record(existing)

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
        limited = claim_filter(
            backends, ids, lambda column, values: (f"{column} = ANY(?)", [list(values)])
        )
        if limited is None:
            return []
        condition, filter_params = limited
        params = [owner, float(lease_seconds), *filter_params, int(limit)]
        statement = translate(
            sql.CLAIM, backend_filter=condition, lock="FOR UPDATE SKIP LOCKED"
        ).encode()

        def work(conn: Conn) -> list[Any]:
            # The claim must walk the due-jobs index in not_before order and stop after
            # `limit` rows. With statistics older than a large enqueue, the planner may
            # instead fetch and sort every due job: O(backlog) per claim (measured: 64 ms
            # instead of 1.5 ms with 20,000 queued). Sorting is what that plan needs, so
            # this transaction forbids it; both statements go in one round trip.
            with conn.pipeline():
                conn.execute(dialect(sql.PG_CLAIM_PLAN))
                cur = conn.execute(statement, params)
            return cur.fetchall()

        return claims_of([_record(row) for row in self._db.run(work, write=True)])

    def claim_batch(
        self,
        owner: str,
        *,
        limit: int,
        lease_seconds: float,
        backends: Sequence[str] | None = None,
        ids: Sequence[str] | None = None,
    ) -> list[Claim]:
        limited = (
            claim_filter(
                backends, ids, lambda column, values: (f"jobs.{column} = ANY(?)", [list(values)])
            )
            if limit > 0
            else None
        )
        if limited is None:
            return []
        condition, filter_params = limited
        pick = translate(sql.BATCH_SWEEP, backend_filter=condition).encode()
        claim = translate(
            sql.CLAIM_BATCH, backend_filter=condition, lock="FOR UPDATE OF jobs SKIP LOCKED"
        ).encode()

        def work(conn: Conn) -> list[Any]:
            found = conn.execute(pick, filter_params).fetchone()
            if found is None:
                return []
            params = [owner, float(lease_seconds), found[0], *filter_params, int(limit)]
            return conn.execute(claim, params).fetchall()

        return claims_of([_record(row) for row in self._db.run(work, write=True)])

    def renew(
        self, owner: str, leases: Sequence[tuple[str, int]], lease_seconds: float
    ) -> set[str]:
        if not leases:
            return set()

        def work(conn: Conn) -> set[str]:
            rows = [(float(lease_seconds), job_id, token, owner) for job_id, token in leases]
            kept = each_row(conn, dialect(sql.PG_RENEW), rows)
            return {row[0] for row in kept if row is not None}

        return self._db.run(work, write=True)

    def record_handle(self, job_id: str, token: int, handle: str, poll_after: float) -> None:
        self._fenced(sql.RECORD_HANDLE, (handle, float(poll_after), job_id, token), job_id)

    def snooze(self, job_id: str, token: int, poll_after: float) -> None:
        self._fenced(sql.SNOOZE, (float(poll_after), job_id, token), job_id)

    def retry(
        self, job_id: str, token: int, error_class: str, message: str, delay: float
    ) -> JobState:
        def work(conn: Conn) -> JobState:
            inserted = conn.execute(
                dialect(sql.INSERT_ATTEMPT),
                (error_class, message, float(delay), job_id, token),
            ).rowcount
            row = conn.execute(
                dialect(sql.RETRY), (message, float(delay), job_id, token)
            ).fetchone()
            if inserted != 1 or row is None:
                raise _lost(job_id)
            return JobState(row[0])

        return self._db.run(work, write=True)

    def fail(self, job_id: str, token: int, error_class: str, message: str) -> None:
        def work(conn: Conn) -> None:
            inserted = conn.execute(
                dialect(sql.INSERT_ATTEMPT), (error_class, message, None, job_id, token)
            ).rowcount
            if (
                inserted != 1
                or conn.execute(dialect(sql.FAIL), (message, job_id, token)).rowcount != 1
            ):
                raise _lost(job_id)

        self._db.run(work, write=True)

    def record_tries(self, job_id: str, token: int, tries: Sequence[TryInCall]) -> None:
        if not tries:
            return
        rows = [(t.seconds_ago, t.error_class, t.message, job_id, token) for t in tries]

        def work(conn: Conn) -> None:
            # One at a time: each number follows the one inserted before it.
            for row in rows:
                if conn.execute(dialect(sql.INSERT_TRY_IN_CALL), row).rowcount != 1:
                    raise _lost(job_id)

        self._db.run(work, write=True)

    def finish(self, completions: Sequence[Completion], appender: LogAppender) -> list[bool]:
        if not completions:
            return []

        rows = [result_row(item) for item in completions]  # before the transaction

        def work(conn: Conn) -> list[bool]:
            # Fenced on each token; all in one pipelined round trip.
            finished = each_row(
                conn,
                dialect(sql.PG_FINISH),
                [(c.job_id, c.token) for c in completions],
            )
            done = [row is not None for row in finished]
            accepted = [item for item, ok in zip(completions, done, strict=True) if ok]
            if accepted:
                with conn.cursor() as cur:
                    cur.executemany(
                        dialect(sql.INSERT_RESULT),
                        [row for row, ok in zip(rows, done, strict=True) if ok],
                    )
                self._append_log(
                    conn, [(c.job_id, c.envelope, c.signer) for c in accepted], appender
                )
            return done

        return self._db.run(work, write=True)

    def finish_batch(
        self, batch_id: str, completions: Sequence[Completion], envelope: bytes, signer: str,
        appender: LogAppender,
    ) -> list[bool]:  # fmt: skip
        rows = [result_row(item) for item in completions]  # before the transaction
        held: list[bool] = []

        def work(conn: Conn) -> None:
            nonlocal held
            finished = each_row(
                conn, dialect(sql.PG_FINISH), [(c.job_id, c.token) for c in completions]
            )
            held = [row is not None for row in finished]
            if not all(held):
                raise BatchIncomplete  # rolls the transaction back
            with conn.cursor() as cur:
                cur.executemany(dialect(sql.INSERT_RESULT), rows)
                cur.executemany(
                    dialect(sql.INSERT_BATCH_POINT), [(c.job_id, batch_id) for c in completions]
                )
            self._append_log(conn, [(batch_id, envelope, signer)], appender)

        with contextlib.suppress(BatchIncomplete):  # rolled back: ``held`` says why
            self._db.run(work, write=True)
        return held

    def record_comparison(
        self, comparison: ComparisonRecord, envelope: bytes, signer: str, appender: LogAppender
    ) -> None:
        c = comparison
        params = (c.id, c.kind, c.job_a, c.job_b, c.verdict, c.report)

        def work(conn: Conn) -> None:
            # Idempotent, so a retry after a commit whose answer was lost adds nothing.
            if conn.execute(dialect(sql.PG_INSERT_COMPARISON), params).fetchone() is not None:
                self._append_log(conn, [(c.id, envelope, signer)], appender)

        self._db.run(work, write=True)

    def _append_log(
        self, conn: Conn, items: Sequence[tuple[str, bytes, str]], appender: LogAppender
    ) -> None:
        """Append (subject id, envelope, signer) entries under the log lock."""
        # The log lock: held from here to the commit, by one finisher at a time.
        row = conn.execute(dialect(sql.PG_LOCK_LOG)).fetchone()
        if row is None:  # an archive whose row went missing: recreate it, then lock it
            conn.execute(dialect(sql.PG_LOG_STATE_SEED))
            row = conn.execute(dialect(sql.PG_LOCK_LOG)).fetchone()
            assert row is not None
        size = int(row[0])
        state = bytes(row[1]) if size else None
        leaves, new_state, root, note = appender(state, size, [env for _, env, _ in items])
        new_size = size + len(items)
        # Everything else the lock covers goes in one round trip.
        with conn.pipeline(), conn.cursor() as cur:
            cur.executemany(
                dialect(sql.INSERT_LOG_ENTRY),
                [
                    (size + offset, subject, envelope, leaf, signer)
                    for offset, ((subject, envelope, signer), leaf) in enumerate(
                        zip(items, leaves, strict=True)
                    )
                ],
            )
            cur.execute(dialect(sql.PG_UPDATE_LOG_STATE), (new_size, new_state))
            cur.execute(dialect(sql.INSERT_CHECKPOINT), (new_size, root, note))

    def release(self, owner: str, leases: Sequence[tuple[str, int]]) -> None:
        if not leases:
            return

        def work(conn: Conn) -> None:
            with conn.cursor() as cur:
                cur.executemany(
                    dialect(sql.RELEASE),
                    [(job_id, token, owner) for job_id, token in leases],
                )

        self._db.run(work, write=True)

    def requeue_expired(self) -> int:
        def work(conn: Conn) -> int:
            return int(conn.execute(dialect(sql.REQUEUE_EXPIRED)).rowcount)

        return self._db.run(work, write=True)

    def request_cancel(self, job_id: str) -> JobRecord:
        def work(conn: Conn) -> None:
            if conn.execute(dialect(sql.CANCEL_QUEUED), (job_id,)).rowcount == 0:
                conn.execute(dialect(sql.REQUEST_CANCEL), (job_id,))

        self._db.run(work, write=True)
        return self.get(job_id)

    def mark_cancelled(self, job_id: str, token: int) -> None:
        self._fenced(sql.MARK_CANCELLED, (job_id, token), job_id)

    def wait_for_work(self, timeout: float) -> bool:
        """Wait up to ``timeout`` seconds for a hint that jobs were enqueued; True when one
        came. Only a hint: callers still claim (or poll) to find out what is due. Uses one
        dedicated connection, opened on first use."""
        try:
            if self._listener is None or self._listener.closed:
                self._listener = self._db.connect()
                self._listener.execute(dialect(sql.PG_LISTEN))
            for _ in self._listener.notifies(timeout=max(0.0, timeout), stop_after=1):
                return True
            return False
        except psycopg.Error:
            if self._listener is not None:
                self._listener.close()
            self._listener = None
            return False

    def register_key(self, fingerprint: str, public_key_b64: str) -> None:
        def work(conn: Conn) -> None:
            conn.execute(dialect(sql.REGISTER_KEY), (fingerprint, public_key_b64))

        self._db.run(work, write=True)

    def set_meta(self, key: str, value: str) -> None:
        def work(conn: Conn) -> None:
            conn.execute(dialect(sql.SET_META), (key, value))

        self._db.run(work, write=True)

    def ensure_meta(self, key: str, value: str) -> str:
        def work(conn: Conn) -> str:
            conn.execute(dialect(sql.ENSURE_META), (key, value))
            row = conn.execute(dialect(sql.GET_META), (key,)).fetchone()
            assert row is not None
            return str(row[0])

        return self._db.run(work, write=True)

    def close(self) -> None:
        if self._listener is not None:
            self._listener.close()
            self._listener = None
        self._db.close()

    def __enter__(self) -> PostgresStore:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
