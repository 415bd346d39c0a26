"""The worker daemon: claim → start → poll → seal → archive.

One asyncio loop per worker process. Local simulations run in a pool of worker processes
(or inline, for ``jobkeeper run``); remote devices are driven on the loop, so one worker
holds many remote jobs in flight — and a waiting job holds no slot at all: it is a row with
a next-poll time, claimed again only when its poll is due.

Store calls run on one dedicated thread (a store connection is used by one thread at a
time, and a busy database must not stall heartbeats). Finished jobs are archived in
batches (:mod:`jobkeeper.group_commit`); local simulations are run by
:class:`jobkeeper._execution.LocalRunner`.

A store fault (the archive's disk full or read-only, an I/O error, a damaged file) stops
the worker at once with that error; no job is marked failed for it (see ``note_fault``).

Shutdown: the first SIGTERM/SIGINT stops claiming, lets running work finish for a grace
period, gives back what is left and exits 0. SIGKILL at any instant loses nothing: leases
expire and the next worker picks the jobs up; a device sees the same client key again.
"""

from __future__ import annotations

import asyncio
import contextlib
import gc
import logging
import signal
import uuid
from collections.abc import Callable, Collection
from concurrent.futures import ThreadPoolExecutor
from typing import Literal, TypedDict, TypeVar

from jobkeeper._execution import LocalRunner, run_coroutine
from jobkeeper.audit.sealing import Sealer
from jobkeeper.backend import Backend
from jobkeeper.batch_steps import BatchSteps
from jobkeeper.exceptions import JobkeeperError, StoreFault, StoreUnavailable
from jobkeeper.group_commit import GroupCommit
from jobkeeper.job_steps import Held, WorkerStats
from jobkeeper.queue import (
    DEFAULT_LEASE,
    DEFAULT_POLL,
    DEFAULT_RETRY,
    LIVE_STATES,
    LeasePolicy,
    PollPolicy,
    RetryPolicy,
)
from jobkeeper.store import Store

__all__ = ["Worker", "WorkerSettings", "WorkerStats", "run_coroutine", "settle_daemon"]

log = logging.getLogger("jobkeeper.worker")
T = TypeVar("T")

BackendResolver = Callable[[str], Backend]


def settle_daemon() -> None:
    """For a process that is a worker and nothing else, once it has started: move every
    object alive now (modules, classes, the keep's state) out of the garbage collector's
    sight. Each full collection otherwise walks all of them again, about a tenth of a
    worker's time on small jobs (measured: 786 → 688 µs of CPU per 2-qubit job). Not for
    a notebook: its objects would never be collected as cycles."""
    gc.collect()
    gc.freeze()


class WorkerSettings(TypedDict, total=False):
    """How a worker runs (the keyword arguments of :class:`Worker` beyond its parts, and of
    :meth:`jobkeeper.Keeper.work`); see :class:`Worker` for their meaning and defaults."""

    slots: int
    in_flight: int
    lease: LeasePolicy
    retry: RetryPolicy
    poll: PollPolicy
    backends: Collection[str] | None
    ids: Collection[str] | None
    local_executor: Literal["process", "thread"]
    idle_sleep: float
    grace: float
    store_patience: float
    batches: bool


class Worker(BatchSteps):
    """Drains the queue of one store. Keyword-only; the caller passes every part in."""

    def __init__(
        self,
        *,
        store: Store,
        resolve_backend: BackendResolver,
        sealer: Sealer,
        slots: int = 2,
        in_flight: int = 64,
        lease: LeasePolicy = DEFAULT_LEASE,
        retry: RetryPolicy = DEFAULT_RETRY,
        poll: PollPolicy = DEFAULT_POLL,
        backends: Collection[str] | None = None,
        ids: Collection[str] | None = None,
        local_executor: Literal["process", "thread"] = "process",  # thread: no processes
        idle_sleep: float = 0.5,
        grace: float = 30.0,
        store_patience: float = 300.0,
        batches: bool = True,
    ) -> None:
        if slots < 1 or in_flight < 1:
            raise ValueError("slots and in_flight must be at least 1")
        self.store = store
        self.resolve_backend = resolve_backend
        self.sealer = sealer
        self.slots = slots
        self.in_flight = max(in_flight, slots)
        self.lease = lease
        self.retry = retry
        self.poll = poll
        self.backends = sorted(backends) if backends is not None else None
        self.ids = sorted(ids) if ids is not None else None
        self.local_executor = local_executor
        self.idle_sleep = idle_sleep
        self.grace = grace
        self.store_patience = store_patience
        #: claim due sweep points in batches (jobkeeper.batch_steps)
        self.batches = batches
        self._batches: set[asyncio.Task[None]] = set()
        self.owner = f"{uuid.uuid4().hex[:12]}"
        self.stats = WorkerStats()
        self._held: dict[str, Held] = {}
        self._db = ThreadPoolExecutor(max_workers=1, thread_name_prefix="jobkeeper-store")
        self._local_runs = LocalRunner(slots, local_executor)
        self._group = GroupCommit(self._commit, lambda: len(self._held))
        self._stopping = asyncio.Event()
        self._fault: StoreFault | None = None
        self._wake = asyncio.Event()
        self._backends: dict[str, Backend] = {}
        self._local: dict[str, bool] = {}

    # -- plumbing -----------------------------------------------------------------------

    def request_stop(self) -> None:
        """Stop claiming; running work finishes (see ``grace``), then ``run`` returns."""
        self._stopping.set()
        self._wake.set()

    # -- the loop ---------------------------------------------------------------------------

    async def run(
        self,
        *,
        once: bool = False,
        install_signals: bool = False,
        announce: Callable[[str], None] | None = None,
    ) -> WorkerStats:
        """Work until stopped; with ``once``, until nothing is left that this worker could
        claim now or later (no queued, running or waiting job remains)."""
        loop = asyncio.get_running_loop()
        if install_signals:
            for sig in (signal.SIGTERM, signal.SIGINT):
                loop.add_signal_handler(sig, self._on_signal)
        if announce is not None:
            announce(self.owner)
        heartbeat = asyncio.create_task(self._heartbeat())
        self._group.start()
        next_expiry_check = 0.0
        unreachable_since: float | None = None
        try:
            while not self._stopping.is_set():
                now = loop.time()
                try:
                    if now >= next_expiry_check:
                        await self._store(self.store.requeue_expired)
                        next_expiry_check = now + self.lease.expiry_check
                    claimed = await self._claim_more()
                    drained = once and not claimed and not self._held and await self._drained()
                    unreachable_since = None
                except StoreFault as exc:
                    self.note_fault(exc)
                    break
                except StoreUnavailable as exc:
                    # A database restart or a network blip: wait and try again, for a while.
                    unreachable_since = unreachable_since or now
                    if now - unreachable_since > self.store_patience:
                        raise
                    log.warning("archive unreachable, retrying: %s", exc)
                    await asyncio.sleep(min(5.0, self.idle_sleep * 4))
                    continue
                if drained:
                    break
                self._wake.clear()
                if not claimed:
                    with contextlib.suppress(asyncio.TimeoutError):
                        await asyncio.wait_for(self._wake.wait(), self.idle_sleep)
        finally:
            await self._shutdown()
            heartbeat.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await heartbeat
            if install_signals:
                for sig in (signal.SIGTERM, signal.SIGINT):
                    loop.remove_signal_handler(sig)
        if self._fault is not None:
            raise self._fault
        return self.stats

    def note_fault(self, exc: StoreFault) -> None:
        """The archive's disk or file refuses the work (full, read-only, I/O error): stop
        at once and end with this error (exit 3). Jobs in hand are left to their leases,
        none is marked failed: the next worker takes them up once the fault is mended."""
        if self._fault is None:
            log.debug("stopping: %s", exc)
            self._fault = exc
        self.request_stop()

    def _on_signal(self) -> None:
        if self._stopping.is_set():
            # A second signal: give everything back now.
            for held in self._held.values():
                if held.task is not None:
                    held.task.cancel()
        self.request_stop()

    async def _drained(self) -> bool:
        if self.ids is not None:
            jobs = await self._store(self.store.get_many, self.ids)
            return all(job.state.terminal for job in jobs)
        counts = await self._store(self.store.counts_by_state)
        return not any(counts.get(state, 0) for state in LIVE_STATES)

    async def _claim_more(self) -> int:
        free = self.in_flight - len(self._held)
        if free <= 0 or (self._held and free < max(1, self.in_flight // 4)):
            # Claim in batches: a claim is a transaction, and one per freed slot would
            # cost more than the small jobs it hands out.
            return 0
        if self.batches:
            batched = await self._claim_batch(free)
            if batched:
                return batched
        claims = await self._store(
            self.store.claim,
            self.owner,
            limit=min(free, 64),
            lease_seconds=self.lease.lease,
            backends=self.backends,
            ids=self.ids,
        )
        for claim in claims:
            held = Held(claim)
            self._held[claim.job.id] = held
            held.task = asyncio.create_task(self._handle(held))
        self.stats.claimed += len(claims)
        return len(claims)

    async def _heartbeat(self) -> None:
        while True:
            await asyncio.sleep(self.lease.heartbeat)
            leases = [(h.claim.job.id, h.claim.token) for h in self._held.values() if not h.lost]
            if not leases:
                continue
            try:
                kept = await self._store(self.store.renew, self.owner, leases, self.lease.lease)
            except JobkeeperError as exc:
                log.warning("heartbeat failed: %s", exc)
                continue
            for job_id, _ in leases:
                held = self._held.get(job_id)
                # A job whose result is being archived may have been committed just before
                # this renewal: that is no lost lease (the archive's fence decides).
                if held is not None and job_id not in kept and not held.archiving:
                    # Another worker owns it now: stop, archive nothing.
                    held.lost = True
                    self.stats.lost_leases += 1
                    if held.task is not None:
                        held.task.cancel()

    async def _shutdown(self) -> None:
        pending = [h.task for h in self._held.values() if h.task is not None]
        pending += list(self._batches)
        if pending:
            # After a store fault nothing more can be archived: stop now, not after grace.
            grace = 0.0 if self._fault is not None else self.grace
            _, still = await asyncio.wait(pending, timeout=grace)
            for task in still:
                task.cancel()
            if still:
                await asyncio.wait(still, timeout=5.0)
        await self._group.stop()
        for backend in self._backends.values():
            with contextlib.suppress(Exception):
                await backend.aclose()
        self._local_runs.shutdown()
        self._db.shutdown(wait=True)
