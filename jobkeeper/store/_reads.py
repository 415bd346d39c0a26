"""The reading side both stores share: lookups by id or prefix, listings, results, the
log, comparisons, keys and metadata. The SQL is written once with ``?`` placeholders;
each store supplies ``_read(statement, params)`` (the PostgreSQL store translates the
placeholders). Reads hold no transaction open."""

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


def record_of(row: Sequence[Any]) -> JobRecord:
    (
        id_,
        key,
        state,
        backend,
        shots,
        seed,
        repeat,
        label,
        spec,
        created,
        updated,
        not_before,
        attempts,
        max_attempts,
        owner,
        token,
        expires,
        handle,
        started,
        finished,
        error,
        cancel,
        cost,
    ) = row
    return JobRecord(
        id=id_, job_key=key, state=state, backend=backend, shots=shots, seed=seed,
        repeat=repeat, label=label, spec=json.loads(spec), created_at=created,
        updated_at=updated, not_before=not_before, attempts=attempts,
        max_attempts=max_attempts, lease_owner=owner, lease_token=token,
        lease_expires=expires, handle=handle, started_at=started, finished_at=finished,
        error=error, cancel_requested=bool(cancel), cost=cost,
    )  # fmt: skip


def entry_of(row: Sequence[Any]) -> LogEntry:
    idx, job_id, envelope, leaf, signer, created = row
    return LogEntry(int(idx), job_id, bytes(envelope), bytes(leaf), signer, created)


class StoreReads:
    """Reading methods of a store; the store provides ``_read``."""

    def _read(self, statement: str, params: Sequence[Any] = ()) -> list[Any]:
        raise NotImplementedError

    def get(self, id_or_prefix: str) -> JobRecord:
        text = id_or_prefix.strip().lower()
        if not text or any(ch not in "0123456789abcdef" for ch in text):
            raise JobNotFound(f"no job {id_or_prefix!r}: a job id is hexadecimal")
        rows = self._read(
            f"SELECT {sql.JOB_COLUMNS} FROM jobs WHERE id >= ? AND id < ? ORDER BY id LIMIT 2",
            (text, text + "g"),
        )
        if not rows:
            raise JobNotFound(f"no job matches {id_or_prefix!r}")
        if len(rows) > 1 and rows[0][0] != text:
            raise AmbiguousJobId(
                f"{id_or_prefix!r} matches several jobs; give more characters of the id"
            )
        return record_of(rows[0])

    def get_many(self, ids: Sequence[str]) -> list[JobRecord]:
        out: list[JobRecord] = []
        for start in range(0, len(ids), 500):
            chunk = list(ids[start : start + 500])
            marks = ", ".join("?" for _ in chunk)
            rows = self._read(f"SELECT {sql.JOB_COLUMNS} FROM jobs WHERE id IN ({marks})", chunk)
            out.extend(record_of(row) for row in rows)
        order = {job_id: i for i, job_id in enumerate(ids)}
        out.sort(key=lambda job: order[job.id])
        return out

    def list_jobs(
        self, *, label: str | None = None, state: str | None = None, limit: int | None = None
    ) -> list[JobRecord]:
        where, params = [], []
        if label is not None:
            where.append("label = ?")
            params.append(label)
        if state is not None:
            where.append("state = ?")
            params.append(state)
        clause = f"WHERE {' AND '.join(where)}" if where else ""
        tail = f"LIMIT {int(limit)}" if limit else ""
        rows = self._read(
            f"SELECT {sql.JOB_COLUMNS} FROM jobs {clause} ORDER BY created_at, id {tail}", params
        )
        return [record_of(row) for row in rows]

    def counts_by_state(self) -> dict[str, int]:
        return {row[0]: int(row[1]) for row in self._read(
            "SELECT state, COUNT(*) FROM jobs GROUP BY state")}  # fmt: skip

    def attempts(self, job_id: str) -> list[Attempt]:
        rows = self._read(
            "SELECT job_id, number, at, error_class, message, retry_at FROM attempts "
            "WHERE job_id = ? ORDER BY number",
            (job_id,),
        )
        return [Attempt(*row) for row in rows]

    def result(self, job_id: str) -> StoredResult | None:
        rows = self._read(
            "SELECT job_id, counts, probabilities, metadata, created_at FROM results "
            "WHERE job_id = ?",
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
        rows = self._read("SELECT id, job_key FROM jobs WHERE state = ?", (state,))
        return {job_id: key for job_id, key in rows}

    def all_counts(self) -> dict[str, str | None]:
        return {
            job_id: counts for job_id, counts in self._read("SELECT job_id, counts FROM results")
        }

    def log_entry_for(self, job_id: str) -> LogEntry | None:
        rows = self._read(
            "SELECT idx, job_id, envelope, leaf_hash, signer, created_at FROM log_entries "
            "WHERE job_id = ?",
            (job_id,),
        )
        return entry_of(rows[0]) if rows else None

    def log_entries(self, start: int = 0, end: int | None = None) -> list[LogEntry]:
        rows = self._read(
            "SELECT idx, job_id, envelope, leaf_hash, signer, created_at FROM log_entries "
            "WHERE idx >= ? AND idx < ? ORDER BY idx",
            (start, end if end is not None else 2**62),
        )
        return [entry_of(row) for row in rows]

    def checkpoints(self) -> list[StoredCheckpoint]:
        rows = self._read("SELECT size, root, note, created_at FROM checkpoints ORDER BY size")
        return [StoredCheckpoint(int(s), bytes(r), n, c) for s, r, n, c in rows]

    def comparisons(self, job_id: str | None = None) -> list[ComparisonRecord]:
        where, params = ("WHERE job_a = ? OR job_b = ?", (job_id, job_id)) if job_id else ("", ())
        rows = self._read(
            f"SELECT {sql.COMPARISON_COLUMNS} FROM comparisons {where} ORDER BY created_at",
            params,
        )
        return [ComparisonRecord(*row) for row in rows]

    def public_keys(self) -> dict[str, str]:
        rows = self._read(
            "SELECT fingerprint, public_key FROM public_keys ORDER BY created_at, fingerprint"
        )
        return {fp: key for fp, key in rows}

    def spent(self, label: str | None = None) -> float:
        clause, params = "WHERE state IN ('queued', 'running', 'waiting', 'done')", []
        if label is not None:
            clause += " AND label = ?"
            params.append(label)
        return float(self._read(f"SELECT COALESCE(SUM(cost), 0) FROM jobs {clause}", params)[0][0])

    def get_meta(self, key: str) -> str | None:
        rows = self._read("SELECT value FROM meta WHERE key = ?", (key,))
        return str(rows[0][0]) if rows else None
