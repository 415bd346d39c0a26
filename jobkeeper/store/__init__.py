"""The archive: the :class:`Store` protocol, its records, and :func:`open_store`.

Two implementations share one protocol and one test suite: SQLite (``sqlite.py``, the
embedded default, one file in the keep directory) and PostgreSQL (``postgres/``, given
as a ``postgresql://`` URL, for several workers on several machines). Every statement
both run is in ``sql.py``; the reads they share are in ``reads.py``. Each store translates
its driver's errors into :class:`~jobkeeper.exceptions.StoreError` and its subclasses at
its edge: no ``sqlite3`` or psycopg exception leaves a store method.

Rules every implementation keeps (DESIGN §4, notes on queue reliability):

- every state change is one transaction, and nothing is ever deleted;
- leases come from the database's clock, never a worker's;
- every write by a worker after its claim is a compare-and-set on (job id, lease token);
  a write that finds another token raises :class:`~jobkeeper.exceptions.LeaseLost` and
  changes nothing;
- a job's key is unique among live jobs (not failed or cancelled), enforced by a unique
  index and ``INSERT … ON CONFLICT``, so racing submitters of one job get one job;
- a result is archived at most once (the results table's primary key is the job id), in
  the same transaction as the job's move to ``done`` and its log entry.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol

from jobkeeper.queue import JobState
from jobkeeper.spec import JobSpec

if TYPE_CHECKING:
    from jobkeeper.store.sweep_records import NewSweep, SweepPoint, SweepRecord


@dataclass(frozen=True)
class NewJob:
    """A job to enqueue: its spec is everything the worker needs to run it and the
    manifest needs to describe it (stored as columns and a JSON document, see
    :meth:`JobSpec.document <jobkeeper.spec.JobSpec.document>`)."""

    id: str
    job_key: str
    spec: JobSpec
    max_attempts: int
    cost: float | None = None
    #: Labels to give the job; a live or done job found under the same key gets them too.
    labels: Sequence[str] = ()


@dataclass(frozen=True)
class JobRecord:
    """One row of the jobs table. Times are seconds since the epoch, database clock."""

    id: str
    job_key: str
    state: JobState
    spec: JobSpec
    created_at: float
    updated_at: float
    not_before: float
    attempts: int
    max_attempts: int
    lease_owner: str | None
    lease_token: int
    lease_expires: float | None
    handle: str | None
    started_at: float | None
    finished_at: float | None
    error: str | None
    cancel_requested: bool
    cost: float | None
    #: The job's labels, sorted: unsigned annotations for finding and grouping jobs (the
    #: labels it was submitted with, and those of every later submission deduplicated to it).
    labels: tuple[str, ...] = ()


@dataclass(frozen=True)
class JobFilter:
    """Which jobs a listing shows: each field given narrows it (all of them at once).
    ``since`` and ``until`` bound the creation time (seconds since the epoch, ``until``
    excluded)."""

    label: str | None = None
    state: str | None = None
    backend: str | None = None
    since: float | None = None
    until: float | None = None
    #: only the points of this sweep (its full id)
    sweep: str | None = None


#: Where a page of jobs (newest first) goes on from: the last row's (created_at, id).
PageCursor = tuple[float, str]


@dataclass(frozen=True)
class Claim:
    """A job a worker now holds: ``token`` fences every later write. ``was`` is the state
    the job was claimed from (``queued`` to start it, ``waiting`` to poll it)."""

    job: JobRecord
    token: int
    was: JobState


@dataclass(frozen=True)
class Attempt:
    """One failed try against the backend: when, what kind of error, what it said, and when
    to try again. ``in_call`` marks a try the backend itself retried inside one call (a
    REST adapter's quick retries, say): it used up none of the job's attempts."""

    job_id: str
    number: int
    at: float
    error_class: str
    message: str
    retry_at: float | None = None
    in_call: bool = False


@dataclass(frozen=True)
class TryInCall:
    """A try a backend retried inside one call, to be recorded as an attempt:
    ``seconds_ago`` is how long before the store call it failed."""

    error_class: str
    message: str
    seconds_ago: float


@dataclass(frozen=True)
class StoredResult:
    job_id: str
    counts: Mapping[str, int] | None
    probabilities: Mapping[str, float] | None
    metadata: Mapping[str, Any]
    created_at: float


@dataclass(frozen=True)
class LogEntry:
    """One entry of the Merkle log: a signed envelope (canonical JSON bytes)."""

    index: int
    job_id: str
    envelope: bytes
    leaf_hash: bytes
    signer: str
    created_at: float


@dataclass(frozen=True)
class StoredCheckpoint:
    size: int
    root: bytes
    note: str
    created_at: float


@dataclass(frozen=True)
class Completion:
    """A finished job, ready to archive: the result and its signed envelope."""

    job_id: str
    token: int
    result_counts: Mapping[str, int] | None
    result_probabilities: Mapping[str, float] | None
    metadata: Mapping[str, Any]
    envelope: bytes
    signer: str


@dataclass(frozen=True)
class ComparisonRecord:
    """An archived comparison: ``report`` is its canonical JSON document (the signed
    subject); ``job_b`` is None for a comparison against the ideal distribution."""

    id: str
    kind: str  # "rerun", "pair" or "ideal"
    job_a: str
    job_b: str | None
    verdict: str
    report: str
    created_at: float = 0.0


class BatchIncomplete(Exception):
    """Inside a store: a batch lost a point's lease, so its transaction is rolled back."""


class LogAppender(Protocol):
    """Provenance hook the store calls inside a finishing transaction: given the log's saved
    state (None for an empty log), its size and the new envelopes, it returns the leaf
    hashes, the new state and the signed checkpoint note for the new size and root."""

    def __call__(
        self, state: bytes | None, size: int, envelopes: Sequence[bytes]
    ) -> tuple[list[bytes], bytes, bytes, str]:
        """Return (leaf hashes, new state, new root, checkpoint note)."""
        ...


class Store(Protocol):
    """The archive and the queue's durable state. See the module docstring for the rules."""

    location: str

    def now(self) -> float:
        """The database clock, seconds since the epoch."""
        ...

    def enqueue(self, jobs: Sequence[NewJob]) -> list[tuple[JobRecord, bool]]:
        """Insert jobs in one transaction. For each: (the job, True) when created, or (the
        live job with the same key, False) when it already existed (deduplicated)."""
        ...

    def enqueue_sweep(
        self, sweep: NewSweep, jobs: Sequence[NewJob]
    ) -> tuple[str, list[tuple[JobRecord, bool]]]:
        """:meth:`enqueue` the points' jobs and record the sweep (unless a sweep with its
        key is recorded) and its points, all in one transaction. Returns the id of the
        sweep recorded under its key, and the jobs as ``enqueue`` returns them."""
        ...

    def get_sweep(self, id_or_prefix: str) -> SweepRecord:
        """A sweep by id or unambiguous prefix (JobNotFound, AmbiguousJobId)."""
        ...

    def sweep_points(self, sweep_id: str) -> list[SweepPoint]:
        """A sweep's points, in order."""
        ...

    def sweeps_of(self, job_ids: Sequence[str]) -> dict[str, list[tuple[str, int]]]:
        """Job id → the (sweep id, point index) pairs it is a point of."""
        ...

    def claim(
        self,
        owner: str,
        *,
        limit: int,
        lease_seconds: float,
        backends: Sequence[str] | None = None,
        ids: Sequence[str] | None = None,
    ) -> list[Claim]:
        """Claim up to ``limit`` due jobs (queued to start, waiting to poll), oldest first,
        in one short transaction; optionally only jobs of the named backends, or only the
        jobs with the given ids."""
        ...

    def renew(
        self, owner: str, leases: Sequence[tuple[str, int]], lease_seconds: float
    ) -> set[str]:
        """Extend leases still held; return the ids whose lease this owner still holds."""
        ...

    def record_handle(self, job_id: str, token: int, handle: str, poll_after: float) -> None:
        """A remote device accepted the job: store the handle, move to ``waiting``, release
        the lease (a waiting job is a row with a next-poll time, not a held slot)."""
        ...

    def snooze(self, job_id: str, token: int, poll_after: float) -> None:
        """Still waiting: poll again no sooner than ``poll_after`` seconds from now. No
        attempt is used up."""
        ...

    def retry(
        self, job_id: str, token: int, error_class: str, message: str, delay: float
    ) -> JobState:
        """Record a failed attempt; back to ``queued`` (or ``waiting`` when a handle is
        recorded) after ``delay`` seconds, or ``failed`` when out of attempts. Returns the
        new state."""
        ...

    def fail(self, job_id: str, token: int, error_class: str, message: str) -> None:
        """Record the attempt and end the job ``failed``."""
        ...

    def record_tries(self, job_id: str, token: int, tries: Sequence[TryInCall]) -> None:
        """Record tries the backend retried inside one call as attempts (``in_call``),
        numbered after the job's earlier attempts. Fenced on the token; uses no attempt."""
        ...

    def finish(self, completions: Sequence[Completion], appender: LogAppender) -> list[bool]:
        """Archive results, append their envelopes to the log and sign a checkpoint, all
        in one transaction. Each completion is fenced on its token: one whose lease was
        lost is skipped (False) and archives nothing."""
        ...

    def claim_batch(
        self,
        owner: str,
        *,
        limit: int,
        lease_seconds: float,
        backends: Sequence[str] | None = None,
        ids: Sequence[str] | None = None,
    ) -> list[Claim]:
        """Claim up to ``limit`` due queued points of one sweep (that of the point due
        first) in one short transaction (``FOR UPDATE SKIP LOCKED`` on PostgreSQL), to
        run as a batch; none when no sweep point is due. Filters as :meth:`claim`."""
        ...

    def finish_batch(
        self, batch_id: str, completions: Sequence[Completion], envelope: bytes, signer: str,
        appender: LogAppender,
    ) -> list[bool]:  # fmt: skip
        """Archive a batch's results, list its points and append its one envelope to the
        log (subject id ``batch_id``), in one transaction: all or nothing. Each point is
        fenced on its token; when any lease was lost nothing is written and the flags say
        which points are still held (the caller seals those again as a smaller batch)."""
        ...

    def record_comparison(
        self, comparison: ComparisonRecord, envelope: bytes, signer: str, appender: LogAppender
    ) -> None:
        """Archive a comparison and append its signed envelope to the log, one transaction."""
        ...

    def comparisons(self, job_id: str | None = None) -> list[ComparisonRecord]:
        """Comparisons that involve a job (all of them when ``job_id`` is None)."""
        ...

    def release(self, owner: str, leases: Sequence[tuple[str, int]]) -> None:
        """Give leases back at shutdown, without using up an attempt."""
        ...

    def requeue_expired(self) -> int:
        """Jobs whose lease expired go back to ``queued`` (or ``waiting`` when a handle was
        recorded). One conditional update; returns how many."""
        ...

    def request_cancel(self, job_id: str) -> JobRecord:
        """Cancel a queued job at once; ask the worker to cancel a running or waiting one."""
        ...

    def mark_cancelled(self, job_id: str, token: int) -> None: ...

    def get(self, id_or_prefix: str) -> JobRecord:
        """A job by id or unambiguous prefix (JobNotFound, AmbiguousJobId)."""
        ...

    def get_many(self, ids: Sequence[str]) -> list[JobRecord]: ...

    def list_jobs(
        self,
        *,
        label: str | None = None,
        state: str | None = None,
        limit: int | None = None,
        sweep: str | None = None,
    ) -> list[JobRecord]:
        """Jobs oldest first, of one label, state or sweep (its full id) when given."""
        ...

    def page_jobs(
        self, where: JobFilter, *, after: PageCursor | None = None, limit: int = 50
    ) -> list[JobRecord]:
        """Up to ``limit`` jobs matching ``where``, newest first, after the cursor
        (keyset pagination: indexed, whatever the depth)."""
        ...

    def count_jobs(self, where: JobFilter) -> int:
        """How many jobs match ``where``."""
        ...

    def counts_by_state(self) -> dict[str, int]: ...

    def attempts(self, job_id: str) -> list[Attempt]: ...

    def result(self, job_id: str) -> StoredResult | None: ...

    def job_keys(self, state: str) -> dict[str, str]:
        """Job id → job key of every job in ``state``, in one read."""
        ...

    def all_counts(self) -> dict[str, str | None]:
        """Every archived result's counts document (RFC 8785 canonical JSON text, exactly as
        stored) by job id, in one read: verification compares these very bytes."""
        ...

    def all_result_texts(self) -> dict[str, tuple[str | None, str]]:
        """Every result's exact probabilities and metadata as stored (JSON text), by job id,
        in one read: verification compares them with what the manifests sign."""
        ...

    def all_attempts(self) -> dict[str, list[Attempt]]:
        """Every job's attempts, in order, by job id, in one read."""
        ...

    def log_entry_for(self, job_id: str) -> LogEntry | None:
        """The log entry that signs a job: its own, or its batch's."""
        ...

    def batch_members(self) -> dict[str, list[str]]:
        """Batch id → the ids of the jobs its one log entry signs."""
        ...

    def log_entries(self, start: int = 0, end: int | None = None) -> list[LogEntry]: ...

    def checkpoints(self) -> list[StoredCheckpoint]: ...

    def log_state(self) -> tuple[int, bytes] | None:
        """The log's saved state as the next append will read it: (size, compact range),
        None for a log never appended to. ``verify`` recomputes it from the entries."""
        ...

    def register_key(self, fingerprint: str, public_key_b64: str) -> None:
        """List a signing key's public half; the log names it as signer of its entries."""
        ...

    def public_keys(self) -> dict[str, str]:
        """Every listed public key: fingerprint → base64 of the raw 32-byte key."""
        ...

    def spent(self, label: str | None = None) -> float:
        """Total estimated cost of live and done jobs (of one label, or all)."""
        ...

    def get_meta(self, key: str) -> str | None: ...

    def set_meta(self, key: str, value: str) -> None: ...

    def ensure_meta(self, key: str, value: str) -> str:
        """Set ``key`` only if it is absent, in one statement; return the value it has
        (two keeps opened at once on a fresh database agree on one value)."""
        ...

    def close(self) -> None: ...


def counts_text(counts: Mapping[str, int]) -> str:
    """How a store keeps counts: the counts document, RFC 8785 canonical JSON — the very
    bytes whose SHA-256 the signed manifest names, so any change to them is detectable."""
    from jobkeeper.counts import CountTable
    from jobkeeper.hashing import canonical_json

    return canonical_json(counts if isinstance(counts, CountTable) else dict(counts)).decode()


def job_row(job: NewJob) -> tuple[Any, ...]:
    """The parameters of ``sql.INSERT_JOB`` for a new job. The seed column holds the seed
    the user asked for, as text (the column predates seeds resolved at submission); the
    seed the job runs with is an integer in the JSON document (``JobSpec.document``)."""
    spec = job.spec
    requested = None if spec.requested_seed is None else str(spec.requested_seed)
    document = json.dumps(spec.document(), sort_keys=True)
    return (job.id, job.job_key, spec.backend, spec.shots, requested, spec.repeat, document,
            job.max_attempts, job.cost)  # fmt: skip


def labelled(record: JobRecord, labels: Sequence[str]) -> JobRecord:
    """``record`` with ``labels`` added to its own (what the archive holds once the
    labels are written in the same transaction)."""
    if not labels:
        return record
    return replace(record, labels=tuple(sorted({*record.labels, *labels})))


def result_row(item: Completion) -> tuple[str, str | None, str | None, str]:
    """The results row of a completion (job id, counts, probabilities, metadata as text),
    made before the finishing transaction so that the write lock is held for SQL only."""
    return (
        item.job_id,
        None if item.result_counts is None else counts_text(item.result_counts),
        None if item.result_probabilities is None else json.dumps(dict(item.result_probabilities)),
        metadata_text(item.metadata),
    )


def metadata_text(metadata: Mapping[str, Any]) -> str:
    """How a store keeps a result's metadata; the manifest signs the digest of this text."""
    return json.dumps(dict(metadata), sort_keys=True)


def open_store(location: str | Path, *, create: bool = True) -> Store:
    """Open the store at a ``postgresql://`` URL or a SQLite file path."""
    text = str(location)
    if text.startswith(("postgresql://", "postgres://")):
        from jobkeeper.store.postgres import PostgresStore

        return PostgresStore(text, create=create)
    from jobkeeper.store.sqlite import SqliteStore

    return SqliteStore(Path(text), create=create)


__all__ = [
    "Attempt",
    "BatchIncomplete",
    "Claim",
    "ComparisonRecord",
    "Completion",
    "JobFilter",
    "JobRecord",
    "LogAppender",
    "LogEntry",
    "NewJob",
    "PageCursor",
    "Store",
    "StoredCheckpoint",
    "StoredResult",
    "TryInCall",
    "counts_text",
    "metadata_text",
    "open_store",
]
