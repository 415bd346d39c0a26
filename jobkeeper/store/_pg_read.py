"""The PostgreSQL store's reading side: lookups by id or prefix, listings, results, the
log, keys and metadata. Each read is one autocommit statement on a pooled connection (no
transaction is held open). Part of :class:`~jobkeeper.store.postgres.PostgresStore`."""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Any

from jobkeeper.exceptions import AmbiguousJobId, JobNotFound
from jobkeeper.store import (
    Attempt,
    ComparisonRecord,
    JobRecord,
    LogEntry,
    StoredCheckpoint,
    StoredResult,
)
from jobkeeper.store import _sql as sql
from jobkeeper.store._pg_conn import Conn, Database


def _record(row: Sequence[Any]) -> JobRecord:
    # JOB_COLUMNS lists the columns in JobRecord's field order.
    values = list(row)
    values[8] = json.loads(values[8])  # spec
    values[15] = int(values[15])  # lease_token
    values[21] = bool(values[21])  # cancel_requested
    return JobRecord(*values)


def _entry(row: Sequence[Any]) -> LogEntry:
    idx, job_id, envelope, leaf, signer, created = row
    return LogEntry(int(idx), job_id, bytes(envelope), bytes(leaf), signer, created)


class PostgresReads:
    """Reading methods of the store; the store sets ``_db``."""

    _db: Database

    def _read(self, statement: str, params: Sequence[Any] = ()) -> list[Any]:
        def work(conn: Conn) -> list[Any]:
            return conn.execute(statement.encode(), params).fetchall()

        return self._db.run(work, write=False)

    # -- reading --------------------------------------------------------------------------

    def get(self, id_or_prefix: str) -> JobRecord:
        text = id_or_prefix.strip().lower()
        if not text or any(ch not in "0123456789abcdef" for ch in text):
            raise JobNotFound(f"no job {id_or_prefix!r}: a job id is hexadecimal")
        rows = self._read(
            f"SELECT {sql.JOB_COLUMNS} FROM jobs WHERE id >= %s AND id < %s ORDER BY id LIMIT 2",
            (text, text + "g"),
        )
        if not rows:
            raise JobNotFound(f"no job matches {id_or_prefix!r}")
        if len(rows) > 1 and rows[0][0] != text:
            raise AmbiguousJobId(
                f"{id_or_prefix!r} matches several jobs; give more characters of the id"
            )
        return _record(rows[0])

    def get_many(self, ids: Sequence[str]) -> list[JobRecord]:
        if not ids:
            return []
        rows = self._read(f"SELECT {sql.JOB_COLUMNS} FROM jobs WHERE id = ANY(%s)", (list(ids),))
        out = [_record(row) for row in rows]
        order = {job_id: i for i, job_id in enumerate(ids)}
        out.sort(key=lambda job: order[job.id])
        return out

    def list_jobs(
        self, *, label: str | None = None, state: str | None = None, limit: int | None = None
    ) -> list[JobRecord]:
        where, params = [], []
        if label is not None:
            where.append("label = %s")
            params.append(label)
        if state is not None:
            where.append("state = %s")
            params.append(state)
        clause = f"WHERE {' AND '.join(where)}" if where else ""
        tail = f"LIMIT {int(limit)}" if limit else ""
        rows = self._read(
            f"SELECT {sql.JOB_COLUMNS} FROM jobs {clause} ORDER BY created_at, id {tail}", params
        )
        return [_record(row) for row in rows]

    def comparisons(self, job_id: str | None = None) -> list[ComparisonRecord]:
        where, params = ("WHERE job_a = %s OR job_b = %s", (job_id, job_id)) if job_id else ("", ())
        rows = self._read(
            f"SELECT {sql.COMPARISON_COLUMNS} FROM comparisons {where} ORDER BY created_at, id",
            params,
        )
        return [ComparisonRecord(*row) for row in rows]

    def counts_by_state(self) -> dict[str, int]:
        rows = self._read("SELECT state, COUNT(*) FROM jobs GROUP BY state")
        return {row[0]: int(row[1]) for row in rows}

    def attempts(self, job_id: str) -> list[Attempt]:
        rows = self._read(
            "SELECT job_id, number, at, error_class, message, retry_at FROM attempts "
            "WHERE job_id = %s ORDER BY number",
            (job_id,),
        )
        return [Attempt(*row) for row in rows]

    def result(self, job_id: str) -> StoredResult | None:
        rows = self._read(
            "SELECT job_id, counts, probabilities, metadata, created_at FROM results "
            "WHERE job_id = %s",
            (job_id,),
        )
        if not rows:
            return None
        job, counts, probabilities, metadata, created = rows[0]
        return StoredResult(
            job_id=job,
            counts=None if counts is None else json.loads(counts),
            probabilities=None if probabilities is None else json.loads(probabilities),
            metadata=json.loads(metadata),
            created_at=created,
        )

    def job_keys(self, state: str) -> dict[str, str]:
        rows = self._read("SELECT id, job_key FROM jobs WHERE state = %s", (state,))
        return {job_id: key for job_id, key in rows}

    def all_counts(self) -> dict[str, str | None]:
        return {
            job_id: counts for job_id, counts in self._read("SELECT job_id, counts FROM results")
        }

    def log_entry_for(self, job_id: str) -> LogEntry | None:
        rows = self._read(
            "SELECT idx, job_id, envelope, leaf_hash, signer, created_at FROM log_entries "
            "WHERE job_id = %s",
            (job_id,),
        )
        return _entry(rows[0]) if rows else None

    def log_entries(self, start: int = 0, end: int | None = None) -> list[LogEntry]:
        rows = self._read(
            "SELECT idx, job_id, envelope, leaf_hash, signer, created_at FROM log_entries "
            "WHERE idx >= %s AND idx < %s ORDER BY idx",
            (start, end if end is not None else 2**62),
        )
        return [_entry(row) for row in rows]

    def checkpoints(self) -> list[StoredCheckpoint]:
        rows = self._read("SELECT size, root, note, created_at FROM checkpoints ORDER BY size")
        return [StoredCheckpoint(int(s), bytes(r), n, c) for s, r, n, c in rows]

    def get_meta(self, key: str) -> str | None:
        rows = self._read("SELECT value FROM meta WHERE key = %s", (key,))
        return str(rows[0][0]) if rows else None
