"""The reading side both stores share: lookups by id or prefix, listings, results, the
log, comparisons, keys and metadata. The SQL (in :mod:`jobkeeper.store.sql`) is written
once with ``?`` placeholders; each store supplies ``_read(statement, params)`` (the
PostgreSQL store translates the placeholders). Reads hold no transaction open."""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from typing import Any

from jobkeeper.exceptions import DamagedRecord, JobNotFound
from jobkeeper.queue import JobState
from jobkeeper.spec import JobSpec
from jobkeeper.store import (
    Attempt,
    Claim,
    ComparisonRecord,
    JobFilter,
    JobRecord,
    LogEntry,
    PageCursor,
    StoredCheckpoint,
    StoredResult,
    sql,
)
from jobkeeper.store.sweep_records import SweepReads, one_by_prefix

#: How a store writes ``column`` matching one of ``values``: the SQL and its parameters.
InList = Callable[[str, Sequence[str]], tuple[str, list[Any]]]


def claim_filter(
    backends: Sequence[str] | None, ids: Sequence[str] | None, in_list: InList
) -> tuple[str, list[Any]] | None:
    """The extra condition of a claim limited to some backends or some job ids, and its
    parameters; None when nothing can match (an empty list was given)."""
    clause, params = "", []
    for column, values in (("backend", backends), ("id", ids)):
        if values is None:
            continue
        if not values:
            return None
        condition, values_params = in_list(column, values)
        clause += f" AND {condition}"
        params.extend(values_params)
    return clause, params


def claims_of(jobs: Sequence[JobRecord]) -> list[Claim]:
    """Claimed jobs handed out oldest due first; a job with a device handle was waiting
    (it is to be polled), any other was queued (it is to be started)."""
    return [
        Claim(job=job, token=job.lease_token,
              was=JobState.WAITING if job.handle else JobState.QUEUED)
        for job in sorted(jobs, key=lambda job: job.not_before)
    ]  # fmt: skip


@contextmanager
def _readable(what: str) -> Iterator[None]:
    """A row whose JSON or numbers cannot be read was altered or damaged: say which."""
    try:
        yield
    except (ValueError, TypeError, KeyError, AttributeError) as exc:
        raise DamagedRecord(f"{what} is damaged or altered: {exc}") from exc


def record_of(row: Sequence[Any]) -> JobRecord:
    with _readable(f"the archive's row of job {str(row[0])[:12]}"):
        return _record_of(row)


def _record_of(row: Sequence[Any]) -> JobRecord:
    (
        id_,
        key,
        state,
        backend,
        shots,
        seed,
        repeat,
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
        labels,
    ) = row
    return JobRecord(
        id=id_, job_key=key, state=JobState(state), created_at=created,
        spec=JobSpec.from_archive(json.loads(spec), backend=backend, shots=shots,
                                  requested_seed=seed, repeat=repeat, job_key=key),
        updated_at=updated, not_before=not_before, attempts=attempts,
        max_attempts=max_attempts, lease_owner=owner, lease_token=token,
        lease_expires=expires, handle=handle, started_at=started, finished_at=finished,
        error=error, cancel_requested=bool(cancel), cost=cost,
        labels=tuple(sorted(json.loads(labels) or ())) if labels else (),
    )  # fmt: skip


def _result_of(
    job: str, counts: str | None, probabilities: str | None, metadata: str, created: float
) -> StoredResult:
    return StoredResult(
        job_id=job,
        counts=None if counts is None else json.loads(counts),
        probabilities=None if probabilities is None else json.loads(probabilities),
        metadata=json.loads(metadata),
        created_at=created,
    )


def entry_of(row: Sequence[Any]) -> LogEntry:
    idx, job_id, envelope, leaf, signer, created = row
    return LogEntry(int(idx), job_id, bytes(envelope), bytes(leaf), signer, created)


def _conditions(where: JobFilter) -> tuple[list[str], list[Any]]:
    conditions: list[str] = []
    params: list[Any] = []
    for value, condition in (
        (where.label, sql.JOBS_WITH_LABEL), (where.state, sql.JOBS_IN_STATE),
        (where.backend, sql.JOBS_ON_BACKEND), (where.since, sql.JOBS_CREATED_FROM),
        (where.until, sql.JOBS_CREATED_BEFORE), (where.sweep, sql.JOBS_IN_SWEEP),
    ):  # fmt: skip
        if value is not None:
            conditions.append(condition)
            params.append(value)
    return conditions, params


class StoreReads(SweepReads):
    """Reading methods of a store; the store provides ``_read``."""

    #: What the job list's query of a label's jobs names as its index (SQLite only).
    _listing_hint = ""

    def _read(self, statement: str, params: Sequence[Any] = (), **extra: str) -> list[Any]:
        """Run one statement of :mod:`jobkeeper.store.sql` (its slots filled from
        ``extra``) and return every row."""
        raise NotImplementedError

    def get(self, id_or_prefix: str) -> JobRecord:
        text = id_or_prefix.strip().lower()
        if not text or any(ch not in "0123456789abcdef" for ch in text):
            raise JobNotFound(f"no job {id_or_prefix!r}: a job id is hexadecimal")
        rows = self._read(sql.JOB_BY_PREFIX, (text, text + "g"))
        return record_of(one_by_prefix(rows, text, id_or_prefix, "job"))

    def get_many(self, ids: Sequence[str]) -> list[JobRecord]:
        out: list[JobRecord] = []
        for start in range(0, len(ids), 500):
            chunk = list(ids[start : start + 500])
            marks = ", ".join("?" for _ in chunk)
            rows = self._read(sql.JOBS_BY_IDS, chunk, marks=marks)
            out.extend(record_of(row) for row in rows)
        order = {job_id: i for i, job_id in enumerate(ids)}
        out.sort(key=lambda job: order[job.id])
        return out

    def list_jobs(
        self, *, label: str | None = None, state: str | None = None, limit: int | None = None,
        sweep: str | None = None,
    ) -> list[JobRecord]:  # fmt: skip
        where, params = [], []
        if sweep is not None:
            where.append(sql.JOBS_IN_SWEEP)
            params.append(sweep)
        if label is not None:
            where.append(sql.JOBS_WITH_LABEL)
            params.append(label)
        if state is not None:
            where.append(sql.JOBS_IN_STATE)
            params.append(state)
        clause = f"WHERE {' AND '.join(where)}" if where else ""
        tail = f"LIMIT {int(limit)}" if limit else ""
        rows = self._read(sql.LIST_JOBS, params, where=clause, limit=tail)
        return [record_of(row) for row in rows]

    def page_jobs(
        self, where: JobFilter, *, after: PageCursor | None = None, limit: int = 50
    ) -> list[JobRecord]:
        conditions, params = _conditions(where)
        if after is not None:
            conditions.append(sql.JOBS_BEFORE_CURSOR)
            params += [float(after[0]), float(after[0]), str(after[1])]
        clause = f"WHERE {' AND '.join(conditions)}" if conditions else ""
        hint = self._listing_hint if where.label is not None else ""
        rows = self._read(sql.PAGE_JOB_IDS, [*params, int(limit)], where=clause, hint=hint)
        ids = [row[0] for row in rows]
        return self.get_many(ids) if ids else []

    def count_jobs(self, where: JobFilter) -> int:
        conditions, params = _conditions(where)
        clause = f"WHERE {' AND '.join(conditions)}" if conditions else ""
        return int(self._read(sql.COUNT_JOBS, params, where=clause)[0][0])

    def counts_by_state(self) -> dict[str, int]:
        return {row[0]: int(row[1]) for row in self._read(sql.COUNT_BY_STATE)}

    def attempts(self, job_id: str) -> list[Attempt]:
        rows = self._read(sql.ATTEMPTS_OF, (job_id,))
        return [
            Attempt(job, number, at, error_class, message, retry_at, bool(in_call))
            for job, number, at, error_class, message, retry_at, in_call in rows
        ]

    def result(self, job_id: str) -> StoredResult | None:
        rows = self._read(sql.RESULT_OF, (job_id,))
        if not rows:
            return None
        job, counts, probabilities, metadata, created = rows[0]
        with _readable(f"the archived result of job {job_id[:12]}"):
            return _result_of(job, counts, probabilities, metadata, created)

    # -- keys and the log -------------------------------------------------------------------

    def job_keys(self, state: str) -> dict[str, str]:
        rows = self._read(sql.JOB_KEYS_IN_STATE, (state,))
        return {job_id: key for job_id, key in rows}

    def all_counts(self) -> dict[str, str | None]:
        return {job_id: counts for job_id, counts in self._read(sql.ALL_COUNTS)}

    def all_result_texts(self) -> dict[str, tuple[str | None, str]]:
        rows = self._read(sql.ALL_RESULT_TEXTS)
        return {job_id: (probabilities, metadata) for job_id, probabilities, metadata in rows}

    def all_attempts(self) -> dict[str, list[Attempt]]:
        out: dict[str, list[Attempt]] = {}
        for job, number, at, error_class, message, retry_at, in_call in self._read(
            sql.ALL_ATTEMPTS
        ):
            out.setdefault(job, []).append(
                Attempt(job, number, at, error_class, message, retry_at, bool(in_call))
            )
        return out

    def log_entry_for(self, job_id: str) -> LogEntry | None:
        rows = self._read(sql.LOG_ENTRY_FOR, (job_id, job_id))
        return entry_of(rows[0]) if rows else None

    def batch_members(self) -> dict[str, list[str]]:
        rows = self._read(sql.BATCH_MEMBERS)
        out: dict[str, list[str]] = {}
        for job_id, batch_id in rows:
            out.setdefault(batch_id, []).append(job_id)
        return out

    def log_entries(self, start: int = 0, end: int | None = None) -> list[LogEntry]:
        rows = self._read(sql.LOG_ENTRIES, (start, end if end is not None else 2**62))
        return [entry_of(row) for row in rows]

    def checkpoints(self) -> list[StoredCheckpoint]:
        rows = self._read(sql.CHECKPOINTS)
        return [StoredCheckpoint(int(s), bytes(r), n, c) for s, r, n, c in rows]

    def log_state(self) -> tuple[int, bytes] | None:
        rows = self._read(sql.READ_LOG_STATE)
        return (int(rows[0][0]), bytes(rows[0][1])) if rows else None

    def comparisons(self, job_id: str | None = None) -> list[ComparisonRecord]:
        where, params = (sql.COMPARISONS_OF_JOB, (job_id, job_id)) if job_id else ("", ())
        rows = self._read(sql.COMPARISONS, params, where=where)
        return [ComparisonRecord(*row) for row in rows]

    def public_keys(self) -> dict[str, str]:
        rows = self._read(sql.PUBLIC_KEYS)
        return {fp: key for fp, key in rows}

    def spent(self, label: str | None = None) -> float:
        statement, params = sql.SPENT, []
        if label is not None:
            statement, params = f"{statement} AND {sql.JOBS_WITH_LABEL}", [label]
        return float(self._read(statement, params)[0][0])

    def get_meta(self, key: str) -> str | None:
        rows = self._read(sql.GET_META, (key,))
        return str(rows[0][0]) if rows else None
