"""The worker's steps for a batch: many due points of one sweep, claimed at once
(:meth:`Store.claim_batch <jobkeeper.store.Store.claim_batch>`), run on a local
simulator one after another on one thread, and sealed by one signed statement with one log
entry (:mod:`jobkeeper.audit.batch_sealing`) in one transaction.

Each point runs exactly as it would alone — the same task built from its archived spec,
its own seed — so its counts never depend on the batch it ran in. A point the batch cannot
take (a remote backend, no bindings, a failure of its own) leaves the batch and goes the
single job's way: its own retry or failure, or the ordinary steps. A batch whose commit
finds a lease lost is sealed again without the points it lost. (A mixin of
:class:`jobkeeper.worker.Worker`.)
"""

from __future__ import annotations

import asyncio
import logging
from collections.abc import Sequence
from functools import partial
from typing import cast

from jobkeeper._execution import build_task
from jobkeeper.audit.batch_sealing import seal_batch
from jobkeeper.backend import LocalBackend, Result
from jobkeeper.exceptions import (
    JobkeeperError,
    PermanentBackendError,
    StoreFault,
    StoreUnavailable,
    TransientBackendError,
)
from jobkeeper.job_steps import Held, JobSteps, disk_fault
from jobkeeper.queue import LeasePolicy
from jobkeeper.store import Attempt, Claim, Store

log = logging.getLogger("jobkeeper.worker")

#: Most points one batch claims: one statement and one transaction carry them all.
BATCH_POINTS = 512
#: After a look for due sweep points found none, seconds before the next look: the look
#: reads the queued jobs, so a queue of plain jobs must not pay it at every claim
#: (points submitted meanwhile are claimed the ordinary way until then).
BATCH_RECHECK = 1.0


class BatchSteps(JobSteps):
    """Claiming and running batches of sweep points (see the module docstring)."""

    lease: LeasePolicy
    backends: list[str] | None
    ids: list[str] | None
    _batches: set[asyncio.Task[None]]
    _next_batch_look: float = 0.0

    async def _claim_batch(self, free: int) -> int:
        """Claim a batch of one sweep's due points (at most ``free``); how many."""
        now = asyncio.get_running_loop().time()
        if free < 2 or now < self._next_batch_look:
            return 0
        claims = await self._store(
            self.store.claim_batch, self.owner, limit=min(free, BATCH_POINTS),
            lease_seconds=self.lease.lease, backends=self.backends, ids=self.ids,
        )  # fmt: skip
        if not claims:
            self._next_batch_look = now + BATCH_RECHECK
            return 0
        batch: list[Held] = []
        for claim in claims:
            held = Held(claim)
            self._held[claim.job.id] = held
            backend = self._backend(claim.job.spec.backend)
            if claim.job.spec.bindings is not None and self._is_local(
                claim.job.spec.backend, backend
            ):
                batch.append(held)
            else:  # not for a batch: the single job's way
                held.task = asyncio.create_task(self._handle(held))
        if batch:
            task = asyncio.create_task(self._run_batch(batch))
            self._batches.add(task)
            task.add_done_callback(self._batches.discard)
        self.stats.claimed += len(claims)
        return len(claims)

    async def _run_batch(self, batch: list[Held]) -> None:
        try:
            by_backend: dict[str, list[Held]] = {}
            for held in batch:
                by_backend.setdefault(held.claim.job.spec.backend, []).append(held)
            for name, helds in by_backend.items():
                await self._batch_on(cast(LocalBackend, self._backend(name)), helds)
        except StoreFault as exc:
            self.note_fault(exc)  # the worker stops; the points are left to their leases
        except StoreUnavailable as exc:
            # As for a single job: the points are left to their leases.
            log.warning("batch: archive unreachable, left to the leases: %s", exc)
            self.stats.errors.append(str(exc))
        except Exception as exc:  # a bug must not stop the worker: each point fails alone
            fault = disk_fault(exc)
            if fault is not None:  # the machine's disk, not the points, is at fault
                self.note_fault(fault)
                return
            log.exception("batch: unexpected error")
            for held in batch:
                if held.claim.job.id in self._held:
                    await self._fail(held, exc)
        finally:
            for held in batch:
                self._held.pop(held.claim.job.id, None)
            self._wake.set()

    async def _batch_on(self, backend: LocalBackend, helds: list[Held]) -> None:
        results = await asyncio.to_thread(_run_all, backend, [h.claim for h in helds])
        ran: list[tuple[Held, Result]] = []
        for held, outcome in zip(helds, results, strict=True):
            if isinstance(outcome, Result):
                ran.append((held, outcome))
            elif isinstance(outcome, TransientBackendError):
                await self._retry(held, outcome, outcome.retry_after)
                self._held.pop(held.claim.job.id, None)
            else:
                await self._fail(held, outcome)
                self._held.pop(held.claim.job.id, None)
        attempts = await self._store(_attempts_of, self.store, [h.claim for h, _ in ran])
        while ran:
            ran = [(h, r) for h, r in ran if not h.lost]
            if not ran:
                return
            sealed = seal_batch(self.sealer, [(h.claim, r) for h, r in ran], backend.info,
                                attempts)  # fmt: skip
            for held, _ in ran:
                held.archiving = True
            kept = await self._store(
                self.sealer.commit,
                partial(self.store.finish_batch, sealed.id, sealed.completions,
                        sealed.envelope, sealed.signer),
            )  # fmt: skip
            if all(kept):
                self.stats.done += len(ran)
                return
            # A lease was lost: nothing was written; seal again what is still held.
            self.stats.lost_leases += kept.count(False)
            ran = [item for item, ok in zip(ran, kept, strict=True) if ok]


def _run_all(backend: LocalBackend, claims: Sequence[Claim]) -> list[Result | BaseException]:
    """Each point's task built from its archived spec and run with its own seed, exactly
    as a single job's; a point's failure is its own."""
    out: list[Result | BaseException] = []
    for claim in claims:
        try:
            out.append(backend.execute(build_task(claim.job)))
        except (JobkeeperError, ValueError, MemoryError) as exc:
            out.append(exc if isinstance(exc, JobkeeperError) else PermanentBackendError(str(exc)))
    return out


def _attempts_of(store: Store, claims: Sequence[Claim]) -> dict[str, list[Attempt]]:
    """The attempt history of the points that have one (a point claimed for the first
    time on a local backend has none: no try inside a call happens there)."""
    return {c.job.id: store.attempts(c.job.id) for c in claims if c.job.attempts > 0}


__all__ = ["BATCH_POINTS", "BatchSteps"]
