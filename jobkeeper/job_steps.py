"""The worker's steps for one claimed job: start it (a local simulation, or a device's
handle), poll it, archive its result, or record a retry, a failure or a cancellation.
Each step is fenced on the claim's lease token: a worker that lost the lease changes
nothing. (A mixin of :class:`jobkeeper.worker.Worker`, which owns the loop.)"""

from __future__ import annotations

import asyncio
import contextlib
import errno
import logging
import time
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from functools import partial
from typing import Any, TypeVar, cast

from jobkeeper._execution import LocalRunner, build_task
from jobkeeper.audit.sealing import Sealer
from jobkeeper.backend import Backend, LocalBackend, Result, Try, collect_tries
from jobkeeper.exceptions import (
    JobkeeperError,
    LeaseLost,
    PermanentBackendError,
    StoreFault,
    StoreUnavailable,
    TransientBackendError,
)
from jobkeeper.group_commit import GroupCommit
from jobkeeper.queue import JobState, PollPolicy, RetryPolicy
from jobkeeper.store import Claim, Completion, Store, TryInCall

log = logging.getLogger("jobkeeper.worker")
T = TypeVar("T")


@dataclass
class WorkerStats:
    """What a worker did, counted."""

    claimed: int = 0
    done: int = 0
    failed: int = 0
    retried: int = 0
    cancelled: int = 0
    lost_leases: int = 0
    polls: int = 0
    errors: list[str] = field(default_factory=list)


@dataclass
class Held:
    """One claimed job in a worker's hands."""

    claim: Claim
    task: asyncio.Task[None] | None = None
    lost: bool = False
    archiving: bool = False
    #: Tries the backend retried inside its calls, not yet recorded.
    tries: list[Try] = field(default_factory=list)
    tried_in_call: bool = False


#: OSError numbers that say the disk, not the job, is at fault: full (ENOSPC, EDQUOT),
#: read-only (EROFS), an I/O error (EIO).
_DISK_ERRNOS = frozenset({errno.ENOSPC, errno.EDQUOT, errno.EROFS, errno.EIO})


def disk_fault(exc: BaseException) -> StoreFault | None:
    """A StoreFault for an OSError of the machine's disk met while running a job (where a
    simulator or the sealer writes a file); None for anything else."""
    if isinstance(exc, OSError) and exc.errno in _DISK_ERRNOS:
        return StoreFault(f"the disk refused a write: {exc}; no job was marked failed for it")
    return None


class JobSteps:
    """What the worker does with one claimed job (see the module's docstring)."""

    store: Store
    sealer: Sealer
    retry: RetryPolicy
    poll: PollPolicy
    owner: str
    stats: WorkerStats
    _held: dict[str, Held]
    _local_runs: LocalRunner
    _group: GroupCommit
    _stopping: asyncio.Event
    _wake: asyncio.Event
    resolve_backend: Callable[[str], Backend]
    _db: ThreadPoolExecutor
    note_fault: Callable[[StoreFault], None]
    _backends: dict[str, Backend]
    _local: dict[str, bool]

    async def _store(self, fn: Callable[..., T], *args: Any, **kwargs: Any) -> T:
        loop = asyncio.get_running_loop()
        return await loop.run_in_executor(self._db, lambda: fn(*args, **kwargs))

    def _backend(self, name: str) -> Backend:
        if name not in self._backends:
            self._backends[name] = self.resolve_backend(name)
        return self._backends[name]

    def _is_local(self, name: str, backend: Backend) -> bool:
        # A protocol isinstance check inspects every member: measured at a tenth of the
        # worker's time on small jobs, so it is asked once per backend.
        if name not in self._local:
            self._local[name] = isinstance(backend, LocalBackend)
        return self._local[name]

    async def _handle(self, held: Held) -> None:
        claim = held.claim
        job = claim.job
        try:
            backend = self._backend(job.spec.backend)
            if job.cancel_requested:
                if claim.was == JobState.WAITING and job.handle:
                    with collect_tries(held.tries):
                        await backend.cancel(job.handle)
                await self._record_tries(held)
                await self._store(self.store.mark_cancelled, job.id, claim.token)
                self.stats.cancelled += 1
                return
            if claim.was == JobState.WAITING and job.handle:
                await self._poll(held, backend)
            else:
                await self._start(held, backend)
        except LeaseLost:
            self.stats.lost_leases += 1
        except StoreFault as exc:
            # The archive's disk refuses (full, read-only, I/O error): the whole worker
            # stops; this job is left to its lease like any other in hand.
            self.note_fault(exc)
        except StoreUnavailable as exc:
            # The archive is out of reach: leave the job as it is. Its lease lapses and it
            # is taken up again (a device sees the same client key); failing it would
            # need the very store that is missing.
            log.warning("job %s: archive unreachable, left to its lease: %s", job.id, exc)
            self.stats.errors.append(str(exc))
        except asyncio.CancelledError:
            if not held.lost and self._stopping.is_set():
                # Shutdown: hand the job back untouched.
                with contextlib.suppress(JobkeeperError):
                    await self._store(self.store.release, self.owner, [(job.id, claim.token)])
        except TransientBackendError as exc:
            await self._retry(held, exc, exc.retry_after)
        except (PermanentBackendError, JobkeeperError) as exc:
            await self._fail(held, exc)
        except BrokenProcessPool as exc:
            self._local_runs.drop_broken_pool()
            await self._retry(held, exc, None)
        except Exception as exc:  # a bug in a backend must fail its job, not the worker
            fault = disk_fault(exc)
            if fault is not None:  # the machine's disk, not the job, is at fault
                self.note_fault(fault)
                return
            log.exception("job %s: unexpected error", job.id)
            await self._fail(held, exc)
        finally:
            self._held.pop(job.id, None)
            self._wake.set()

    async def _start(self, held: Held, backend: Backend) -> None:
        claim = held.claim
        task = build_task(claim.job)
        if self._is_local(claim.job.spec.backend, backend):
            result = await self._local_runs.run(cast(LocalBackend, backend), task)
            await self._archive(held, backend, result)
            return
        with collect_tries(held.tries):
            started = await backend.start(task, client_key=claim.job.job_key)
        await self._record_tries(held)
        if started.result is not None:
            await self._archive(held, backend, started.result)
            return
        if started.handle is None:
            raise PermanentBackendError(
                f"backend {claim.job.spec.backend} returned neither a result nor a handle"
            )
        delay = self.poll.next_delay(0, hint=started.poll_after)
        await self._store(
            self.store.record_handle, claim.job.id, claim.token, started.handle, delay
        )

    async def _poll(self, held: Held, backend: Backend) -> None:
        claim = held.claim
        assert claim.job.handle is not None
        with collect_tries(held.tries):
            polled = await backend.poll(claim.job.handle)
        await self._record_tries(held)
        self.stats.polls += 1
        if polled.state == "done" and polled.result is not None:
            await self._archive(held, backend, polled.result)
        elif polled.state == "waiting":
            job = claim.job
            waited = max(0.0, job.updated_at - (job.started_at or job.updated_at))
            delay = self.poll.next_delay(self.poll.polls_after(waited), hint=polled.poll_after)
            await self._store(self.store.snooze, claim.job.id, claim.token, delay)
        elif polled.state == "cancelled":
            await self._store(self.store.mark_cancelled, claim.job.id, claim.token)
            self.stats.cancelled += 1
        else:
            raise PermanentBackendError(polled.message or "the device reported the job failed")

    async def _archive(self, held: Held, backend: Backend, result: Result) -> None:
        claim = held.claim
        # Always read the history: tries a backend retried inside an earlier claim (a
        # remote job's submission, polled to its end by a later claim; a worker that died
        # mid-call) count no attempt, yet the manifest signs them and verify compares.
        attempts = await self._store(self.store.attempts, claim.job.id)
        completion = self.sealer.seal(claim, result, backend.info, attempts)
        held.archiving = True
        if await self._group.archive(completion):
            self.stats.done += 1
        else:
            raise LeaseLost(f"job {claim.job.id}: lease lost before archiving")

    async def _commit(self, completions: Sequence[Completion]) -> list[bool]:
        # Through the sealer: it writes the committed checkpoint to the keep's witness.
        return await self._store(self.sealer.commit, partial(self.store.finish, completions))

    async def _record_tries(self, held: Held) -> None:
        """Record the tries the backend retried inside its last call, before the job's
        next move (so they are numbered before the attempt that move may record)."""
        if not held.tries:
            return
        now = time.monotonic()
        tries = [TryInCall(t.error_class, t.message, max(0.0, now - t.at)) for t in held.tries]
        held.tries.clear()
        held.tried_in_call = True
        job = held.claim.job
        await self._store(self.store.record_tries, job.id, held.claim.token, tries)

    async def _retry(self, held: Held, exc: BaseException, hint: float | None) -> None:
        claim = held.claim
        delay = self.retry.delay(claim.job.attempts + 1, backend_hint=hint)
        try:
            await self._record_tries(held)
            state = await self._store(
                self.store.retry, claim.job.id, claim.token, type(exc).__name__, str(exc), delay
            )
        except LeaseLost:
            self.stats.lost_leases += 1
            return
        except StoreUnavailable as exc:
            self._unrecorded(held, exc)
            return
        if state == JobState.FAILED:
            self.stats.failed += 1
        else:
            self.stats.retried += 1

    async def _fail(self, held: Held, exc: BaseException) -> None:
        claim = held.claim
        try:
            await self._record_tries(held)
            await self._store(
                self.store.fail, claim.job.id, claim.token, type(exc).__name__, str(exc)
            )
            self.stats.failed += 1
        except LeaseLost:
            self.stats.lost_leases += 1
        except StoreUnavailable as exc:
            self._unrecorded(held, exc)

    def _unrecorded(self, held: Held, exc: StoreUnavailable) -> None:
        """A retry or failure the archive could not record: the job stays as it was, left
        to its lease; a fault of the disk stops the worker."""
        if isinstance(exc, StoreFault):
            self.note_fault(exc)
        else:
            log.warning(
                "job %s: archive unreachable, left to its lease: %s", held.claim.job.id, exc
            )
            self.stats.errors.append(str(exc))
