"""One job in a keep (:class:`Job`), and what a submission did with it (:class:`Submitted`).

A :class:`Job` reads its keep's archive: its spec (what runs, with which seed), its state,
attempts, result, signed log entry and the comparisons that involve it. Every reader of
the command line and of the Python API takes its values from here.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

from jobkeeper.exceptions import JobFailed
from jobkeeper.queue import TERMINAL_STATES
from jobkeeper.spec import JobSpec
from jobkeeper.store import Attempt, ComparisonRecord, JobRecord, LogEntry, Store, StoredResult

if TYPE_CHECKING:
    from jobkeeper.counts import RegisterLayout


def wait_for(
    store: Store, ids: Sequence[str], *, timeout: float | None = None, poll: float = 0.2,
    progress: Callable[[int, int], None] | None = None,
) -> list[JobRecord]:  # fmt: skip
    """Block until every job has ended; ``progress(ended, total)`` is told as they do.
    TimeoutError after ``timeout`` seconds."""
    from jobkeeper.options import positive_seconds

    limit = positive_seconds(timeout)
    deadline = None if limit is None else time.monotonic() + limit
    while True:
        records = store.get_many(list(ids))
        ended = sum(record.state in TERMINAL_STATES for record in records)
        if progress is not None:
            progress(ended, len(records))
        if ended == len(records):
            return records
        if deadline is not None and time.monotonic() > deadline:
            raise TimeoutError(f"{len(records) - ended} of {len(records)} jobs have not ended")
        time.sleep(poll)


class Job:
    """A job in a keep. Attributes read the archive afresh after :meth:`refresh`."""

    def __init__(
        self, store: Store, record: JobRecord, keys: Callable[[], Mapping[str, bytes]] | None = None
    ) -> None:
        self._store = store
        self.record = record
        # The keys trusted here: with them, every read of the result is checked against
        # the signed manifest (jobkeeper.audit.reading); a Keeper always gives them.
        self._keys = keys

    def __repr__(self) -> str:
        return f"<Job {self.id[:12]} {self.state} on {self.spec.backend}>"

    @property
    def id(self) -> str:
        return self.record.id

    @property
    def state(self) -> str:
        return self.record.state

    @property
    def spec(self) -> JobSpec:
        """What runs: circuit, backend, shots, the seed (resolved at submission), options."""
        return self.record.spec

    def refresh(self) -> Job:
        self.record = self._store.get(self.id)
        return self

    def wait(self, timeout: float | None = None, *, poll: float = 0.2) -> Job:
        """Block until the job ends (a worker must be running, or use ``Keeper.run``);
        raises TimeoutError after ``timeout`` seconds and JobFailed if it failed."""
        [self.record] = wait_for(self._store, [self.id], timeout=timeout, poll=poll)
        if self.state != "done":
            raise JobFailed(f"job {self.id[:12]} ended {self.state}: {self.record.error or ''}")
        return self

    @property
    def result(self) -> StoredResult | None:
        """The archived result; checked against the signed manifest on every read (exit 1,
        VerificationError, when it is not the signed one)."""
        if self._keys is None:
            return self._store.result(self.id)
        from jobkeeper.audit.reading import signed_result

        return signed_result(self._store, self.id, self._keys())

    @property
    def registers(self) -> RegisterLayout:
        """How the job's count keys are laid out: its classical registers (names and
        widths, in declaration order) and the key convention, as its manifest signs
        them once it is done (checked like :attr:`result`)."""
        from jobkeeper.provenance.manifest import circuit_layout

        if self._keys is not None and self.state == "done":
            from jobkeeper.audit.reading import signed_reading

            layout = signed_reading(self._store, self.id, self._keys())[1]
            if layout is not None:
                return layout
        return circuit_layout(self.spec.circuit_text, self.spec.register_names)

    @property
    def counts(self) -> dict[str, int]:
        """The counts of a done job (count key → shots; see :attr:`registers`)."""
        result = self.result
        if result is None:
            raise JobFailed(f"job {self.id[:12]} is {self.refresh().state}: no counts yet")
        return dict(result.counts or {})

    @property
    def probabilities(self) -> dict[str, float] | None:
        result = self.result
        return (
            None if result is None or result.probabilities is None else dict(result.probabilities)
        )

    @property
    def attempts(self) -> list[Attempt]:
        return self._store.attempts(self.id)

    @property
    def log_entry(self) -> LogEntry | None:
        return self._store.log_entry_for(self.id)

    @property
    def comparisons(self) -> list[ComparisonRecord]:
        """Archived reruns and comparisons that involve this job."""
        return self._store.comparisons(self.id)


@dataclass(frozen=True)
class Submitted:
    """What ``submit`` did with one job: created it, or found it already there."""

    job: Job
    deduplicated: bool
