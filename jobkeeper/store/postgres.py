"""The PostgreSQL store: one database shared by workers on several machines.

Same protocol, same queries (``_sql.py``) and same contract tests as the SQLite store.
What is particular to PostgreSQL:

- **Clock.** ``{now}`` is ``extract(epoch from statement_timestamp())``: the server's clock
  (never a worker's), read once per statement. Not ``now()``, which is frozen at the start
  of the transaction (a finish that waited for the log lock would stamp the time it began
  waiting); not ``clock_timestamp()``, which is volatile: it changes between the columns
  of one row (``lease_expires`` and ``updated_at`` would disagree) and cannot be an index
  bound, so the claim query could not range-scan the due-jobs index.
- **Claims.** ``UPDATE … WHERE id IN (SELECT … ORDER BY not_before LIMIT n FOR UPDATE
  SKIP LOCKED) RETURNING …``: concurrent claimers skip each other's rows instead of
  waiting, and the subselect re-checks the state of a row updated since its snapshot.
  The scan walks the partial index of due jobs (queued or waiting), which finished jobs
  leave, in ``not_before`` order and stops after n rows; the claim's transaction forbids
  the sort-everything plan that stale statistics can otherwise pick.
- **The log lock.** ``finish`` first archives its results (fenced updates, in parallel
  with other finishers), then locks the single ``log_state`` row with ``SELECT … FOR
  UPDATE`` and appends. Appends of all workers are so serialised: log indexes stay
  contiguous and the saved compact range matches them. A row lock rather than an
  advisory lock: it belongs to this schema (archives in other schemas of the database
  do not wait for it) and is released by the commit. Claims never take it.
- **Transactions.** Every state change is one short transaction on a pooled connection
  (a small bounded pool, 1–4 connections by default); reads are single autocommit
  statements; no connection is held between calls, so none is held while a worker waits
  on a remote device. ``idle_in_transaction_session_timeout`` ends a transaction whose
  client stopped (its row locks are freed). A broken connection or a deadlock victim is
  retried on a fresh connection (see ``_pg_conn``).
- **Schema.** Numbered migrations recorded in ``meta.schema_version``, applied in one
  transaction under a transaction-level advisory lock (two workers starting at once do
  not race). ``create=True`` (what ``jobkeeper init --store URL`` does) creates the
  tables; ``schema=`` puts the archive in a schema of its own (created if needed);
  otherwise it lives in the connection's current schema (the URL may set
  ``options=-csearch_path=...``).
- **Wake-ups.** ``enqueue`` sends a NOTIFY; :meth:`PostgresStore.wait_for_work` waits for
  one. It is only a hint (notifications are lost while nobody listens): polling stays the
  truth.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Any

import psycopg

from jobkeeper.exceptions import LeaseLost
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
from jobkeeper.store._pg_conn import (
    LOG_STATE_SEED,
    NOW,
    Conn,
    Database,
    dialect,
    each_row,
    migrate,
    redact,
    translate,
)
from jobkeeper.store._pg_read import PostgresReads
from jobkeeper.store._reads import record_of as _record

WAKE_CHANNEL = "jobkeeper_work"
LOCK_LOG = b"SELECT size, state FROM log_state WHERE id = 1 FOR UPDATE"
INSERT_CHECKPOINT = "INSERT INTO checkpoints (size, root, note, created_at) VALUES (?, ?, ?, {now})"


def _lost(job_id: str) -> LeaseLost:
    return LeaseLost(f"job {job_id}: lease lost, another worker holds it now")


class PostgresStore(PostgresReads):
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

    def _fenced(self, statement: str, params: Sequence[Any], job_id: str) -> None:
        def work(conn: Conn) -> None:
            if conn.execute(dialect(statement).encode(), params).rowcount != 1:
                raise _lost(job_id)

        self._db.run(work, write=True)

    # -- queue ----------------------------------------------------------------------------

    def now(self) -> float:
        return float(self._read(f"SELECT {NOW}")[0][0])

    def enqueue(self, jobs: Sequence[NewJob]) -> list[tuple[JobRecord, bool]]:
        if not jobs:
            return []
        rows = [
            (job.id, job.job_key, job.backend, job.shots, job.seed, job.repeat, job.label,
             json.dumps(dict(job.spec), sort_keys=True), job.max_attempts, job.cost)
            for job in jobs
        ]  # fmt: skip

        def work(conn: Conn) -> list[tuple[JobRecord, bool]]:
            out: list[tuple[JobRecord, bool]] = []
            # Each INSERT … ON CONFLICT DO NOTHING returns its row, or none when a live
            # job has the key.
            inserted = each_row(conn, dialect(sql.INSERT_JOB), rows)
            for job, row in zip(jobs, inserted, strict=True):
                if row is not None:
                    out.append((_record(row), True))
                    continue
                out.append((self._existing_or_insert(conn, job), False))
            if any(created for _, created in out):
                conn.execute("SELECT pg_notify(%s, '')", (WAKE_CHANNEL,))
            return out

        return self._db.run(work, write=True)

    def _existing_or_insert(self, conn: Conn, job: NewJob) -> JobRecord:
        existing = conn.execute(dialect(sql.SELECT_LIVE_BY_KEY).encode(), (job.job_key,)).fetchone()
        if existing is None:
            # The conflicting job left the keyed states between our insert and this read
            # (cancelled or failed meanwhile): the key is free again, so insert ours.
            row = conn.execute(
                dialect(sql.INSERT_JOB).encode(),
                (job.id, job.job_key, job.backend, job.shots, job.seed, job.repeat,
                 job.label, json.dumps(dict(job.spec), sort_keys=True), job.max_attempts,
                 job.cost),
            ).fetchone()  # fmt: skip
            if row is not None:
                return _record(row)
            existing = conn.execute(
                dialect(sql.SELECT_LIVE_BY_KEY).encode(), (job.job_key,)
            ).fetchone()
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
        params: list[Any] = [owner, float(lease_seconds)]
        backend_filter = ""
        for column, values in (("backend", backends), ("id", ids)):
            if values is None:
                continue
            if not values:
                return []
            backend_filter += f" AND {column} = ANY(?)"
            params.append(list(values))
        params.append(int(limit))
        statement = translate(
            sql.CLAIM, backend_filter=backend_filter, lock="FOR UPDATE SKIP LOCKED"
        ).encode()

        def work(conn: Conn) -> list[Any]:
            # The claim must walk the due-jobs index in not_before order and stop after
            # `limit` rows. With statistics older than a large enqueue, the planner may
            # instead fetch and sort every due job: O(backlog) per claim (measured: 64 ms
            # instead of 1.5 ms with 20,000 queued). Sorting is what that plan needs, so
            # this transaction forbids it; both statements go in one round trip.
            with conn.pipeline():
                conn.execute(b"SET LOCAL enable_sort = off")
                cur = conn.execute(statement, params)
            return cur.fetchall()

        claimed = [_record(row) for row in self._db.run(work, write=True)]
        claimed.sort(key=lambda job: job.not_before)
        return [
            Claim(job=job, token=job.lease_token, was="waiting" if job.handle else "queued")
            for job in claimed
        ]

    def renew(
        self, owner: str, leases: Sequence[tuple[str, int]], lease_seconds: float
    ) -> set[str]:
        if not leases:
            return set()

        def work(conn: Conn) -> set[str]:
            rows = [(float(lease_seconds), job_id, token, owner) for job_id, token in leases]
            kept = each_row(conn, dialect(sql.RENEW + " RETURNING id"), rows)
            return {row[0] for row in kept if row is not None}

        return self._db.run(work, write=True)

    def record_handle(self, job_id: str, token: int, handle: str, poll_after: float) -> None:
        self._fenced(sql.RECORD_HANDLE, (handle, float(poll_after), job_id, token), job_id)

    def snooze(self, job_id: str, token: int, poll_after: float) -> None:
        self._fenced(sql.SNOOZE, (float(poll_after), job_id, token), job_id)

    def retry(self, job_id: str, token: int, error_class: str, message: str, delay: float) -> str:
        def work(conn: Conn) -> str:
            inserted = conn.execute(
                dialect(sql.INSERT_ATTEMPT).encode(),
                (error_class, message, float(delay), job_id, token),
            ).rowcount
            row = conn.execute(
                dialect(sql.RETRY).encode(), (message, float(delay), job_id, token)
            ).fetchone()
            if inserted != 1 or row is None:
                raise _lost(job_id)
            return str(row[0])

        return self._db.run(work, write=True)

    def fail(self, job_id: str, token: int, error_class: str, message: str) -> None:
        def work(conn: Conn) -> None:
            inserted = conn.execute(
                dialect(sql.INSERT_ATTEMPT).encode(), (error_class, message, None, job_id, token)
            ).rowcount
            if (
                inserted != 1
                or conn.execute(dialect(sql.FAIL).encode(), (message, job_id, token)).rowcount != 1
            ):
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
                dialect(sql.FINISH + " RETURNING id"),
                [(c.job_id, c.token) for c in completions],
            )
            done = [row is not None for row in finished]
            accepted = [item for item, ok in zip(completions, done, strict=True) if ok]
            if accepted:
                with conn.cursor() as cur:
                    cur.executemany(
                        dialect(sql.INSERT_RESULT).encode(),
                        [row for row, ok in zip(rows, done, strict=True) if ok],
                    )
                self._append_log(
                    conn, [(c.job_id, c.envelope, c.signer) for c in accepted], appender
                )
            return done

        return self._db.run(work, write=True)

    def record_comparison(
        self, comparison: ComparisonRecord, envelope: bytes, signer: str, appender: LogAppender
    ) -> None:
        c = comparison
        params = (c.id, c.kind, c.job_a, c.job_b, c.verdict, c.report)

        def work(conn: Conn) -> None:
            # Idempotent, so a retry after a commit whose answer was lost adds nothing.
            statement = sql.INSERT_COMPARISON.rstrip() + " ON CONFLICT (id) DO NOTHING RETURNING id"
            if conn.execute(dialect(statement).encode(), params).fetchone() is not None:
                self._append_log(conn, [(c.id, envelope, signer)], appender)

        self._db.run(work, write=True)

    def _append_log(
        self, conn: Conn, items: Sequence[tuple[str, bytes, str]], appender: LogAppender
    ) -> None:
        """Append (subject id, envelope, signer) entries under the log lock."""
        # The log lock: held from here to the commit, by one finisher at a time.
        row = conn.execute(LOCK_LOG).fetchone()
        if row is None:  # an archive whose row went missing: recreate it, then lock it
            conn.execute(LOG_STATE_SEED)
            row = conn.execute(LOCK_LOG).fetchone()
            assert row is not None
        size = int(row[0])
        state = bytes(row[1]) if size else None
        leaves, new_state, root, note = appender(state, size, [env for _, env, _ in items])
        new_size = size + len(items)
        # Everything else the lock covers goes in one round trip.
        with conn.pipeline(), conn.cursor() as cur:
            cur.executemany(
                dialect(sql.INSERT_LOG_ENTRY).encode(),
                [
                    (size + offset, subject, envelope, leaf, signer)
                    for offset, ((subject, envelope, signer), leaf) in enumerate(
                        zip(items, leaves, strict=True)
                    )
                ],
            )
            cur.execute(b"UPDATE log_state SET size = %s, state = %s WHERE id = 1",
                        (new_size, new_state))  # fmt: skip
            cur.execute(dialect(INSERT_CHECKPOINT).encode(), (new_size, root, note))

    def release(self, owner: str, leases: Sequence[tuple[str, int]]) -> None:
        if not leases:
            return

        def work(conn: Conn) -> None:
            with conn.cursor() as cur:
                cur.executemany(
                    dialect(sql.RELEASE).encode(),
                    [(job_id, token, owner) for job_id, token in leases],
                )

        self._db.run(work, write=True)

    def requeue_expired(self) -> int:
        def work(conn: Conn) -> int:
            return int(conn.execute(dialect(sql.REQUEUE_EXPIRED).encode()).rowcount)

        return self._db.run(work, write=True)

    def request_cancel(self, job_id: str) -> JobRecord:
        def work(conn: Conn) -> None:
            if conn.execute(dialect(sql.CANCEL_QUEUED).encode(), (job_id,)).rowcount == 0:
                conn.execute(dialect(sql.REQUEST_CANCEL).encode(), (job_id,))

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
                self._listener.execute(f"LISTEN {WAKE_CHANNEL}")
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
            conn.execute(
                dialect("INSERT INTO public_keys (fingerprint, public_key, created_at) "
                   "VALUES (?, ?, {now}) ON CONFLICT (fingerprint) DO NOTHING").encode(),
                (fingerprint, public_key_b64),
            )  # fmt: skip

        self._db.run(work, write=True)

    def set_meta(self, key: str, value: str) -> None:
        def work(conn: Conn) -> None:
            conn.execute(
                "INSERT INTO meta (key, value) VALUES (%s, %s) "
                "ON CONFLICT (key) DO UPDATE SET value = excluded.value",
                (key, value),
            )

        self._db.run(work, write=True)

    def ensure_meta(self, key: str, value: str) -> str:
        def work(conn: Conn) -> str:
            conn.execute(
                "INSERT INTO meta (key, value) VALUES (%s, %s) ON CONFLICT (key) DO NOTHING",
                (key, value),
            )
            row = conn.execute("SELECT value FROM meta WHERE key = %s", (key,)).fetchone()
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
