"""The worker daemon: claim → start → poll → seal → archive.

One asyncio loop per worker process. Local simulations run in a pool of worker processes
(or inline, for ``jobkeeper run``); remote devices are driven on the loop, so one worker
holds many remote jobs in flight — and a waiting job holds no slot at all: it is a row with
a next-poll time, claimed again only when its poll is due.

Store calls run on one dedicated thread (a store connection is used by one thread at a
time, and a busy database must not stall heartbeats). Finished jobs are archived in
batches: whatever completed while the previous batch committed goes in the next
transaction, so the per-commit sync is shared.

Shutdown: the first SIGTERM/SIGINT stops claiming, lets running work finish for a grace
period, gives back what is left and exits 0. SIGKILL at any instant loses nothing: leases
expire and the next worker picks the jobs up; a device sees the same client key again.
"""

from __future__ import annotations

import asyncio
import concurrent.futures
import contextlib
import gc
import logging
import signal
import time
import uuid
from collections.abc import Callable, Collection, Coroutine
from concurrent.futures import Executor, ProcessPoolExecutor, ThreadPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from typing import Any, Literal, TypedDict, TypeVar, cast

from jobkeeper._execution import build_task, one_blas_thread, run_local
from jobkeeper.audit.sealing import Sealer
from jobkeeper.backend import Backend, LocalBackend, Result, Task, Try, collect_tries
from jobkeeper.exceptions import (
    JobkeeperError,
    LeaseLost,
    PermanentBackendError,
    StoreUnavailable,
    TransientBackendError,
)
from jobkeeper.queue import (
    DEFAULT_LEASE,
    DEFAULT_POLL,
    DEFAULT_RETRY,
    LIVE_STATES,
    JobState,
    LeasePolicy,
    PollPolicy,
    RetryPolicy,
)
from jobkeeper.store import Claim, Completion, Store, TryInCall

log = logging.getLogger("jobkeeper.worker")
T = TypeVar("T")

BackendResolver = Callable[[str], Backend]

#: Circuits this small are simulated on a thread of the worker, larger ones in a process.
SMALL_CIRCUIT_QUBITS = 10
#: Circuits this small run on the event loop itself when their backend says it is quick
#: at that size (``inline_qubits``, see LocalBackend): less than handing them to a thread
#: costs (the hand-off and the contention for the interpreter lock were measured at a
#: third of the worker's time on 2-qubit jobs). The operation bound, and at most one
#: measurement or reset per qubit, keep the loop from being held for long.
INLINE_OPERATIONS = 256
#: Finished jobs archived per commit, and how long to wait for company.
GROUP_COMMIT = 32
GROUP_COMMIT_WAIT = 0.004


def run_coroutine(coro: Coroutine[Any, Any, T]) -> T:
    """Run a coroutine to the end, also from inside a running event loop (a notebook):
    there it runs on a fresh loop in a helper thread."""
    try:
        asyncio.get_running_loop()
    except RuntimeError:
        return asyncio.run(coro)
    with concurrent.futures.ThreadPoolExecutor(max_workers=1) as pool:
        return pool.submit(asyncio.run, coro).result()


def settle_daemon() -> None:
    """For a process that is a worker and nothing else, once it has started: move every
    object alive now (modules, classes, the keep's state) out of the garbage collector's
    sight. Each full collection otherwise walks all of them again, about a tenth of a
    worker's time on small jobs (measured: 786 → 688 µs of CPU per 2-qubit job). Not for
    a notebook: its objects would never be collected as cycles."""
    gc.collect()
    gc.freeze()


def _runs_inline(task: Task, backend: LocalBackend) -> bool:
    limit = getattr(backend, "inline_qubits", 0)
    circuit = task.circuit
    if not isinstance(limit, int) or circuit.num_qubits > limit:
        return False
    if len(circuit.operations) > INLINE_OPERATIONS:
        return False
    collapsing = sum(1 for op in circuit.operations if op.name in ("measure", "reset"))
    return collapsing <= circuit.num_qubits


class WorkerSettings(TypedDict, total=False):
    """How a worker runs (the keyword arguments of :class:`Worker` beyond its parts, and of
    :meth:`jobkeeper.Keeper.work`); see :class:`Worker` for their meaning and defaults."""

    concurrency: int
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


@dataclass
class WorkerStats:
    claimed: int = 0
    done: int = 0
    failed: int = 0
    retried: int = 0
    cancelled: int = 0
    lost_leases: int = 0
    polls: int = 0
    errors: list[str] = field(default_factory=list)


@dataclass
class _Held:
    claim: Claim
    task: asyncio.Task[None] | None = None
    lost: bool = False
    archiving: bool = False
    #: Tries the backend retried inside its calls, not yet recorded.
    tries: list[Try] = field(default_factory=list)
    tried_in_call: bool = False


class Worker:
    """Drains the queue of one store. Keyword-only; the caller passes every part in."""

    def __init__(
        self,
        *,
        store: Store,
        resolve_backend: BackendResolver,
        sealer: Sealer,
        concurrency: int = 2,
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
    ) -> None:
        if concurrency < 1 or in_flight < 1:
            raise ValueError("concurrency and in_flight must be at least 1")
        self.store = store
        self.resolve_backend = resolve_backend
        self.sealer = sealer
        self.concurrency = concurrency
        self.in_flight = max(in_flight, concurrency)
        self.lease = lease
        self.retry = retry
        self.poll = poll
        self.backends = sorted(backends) if backends is not None else None
        self.ids = sorted(ids) if ids is not None else None
        self.local_executor = local_executor
        self.idle_sleep = idle_sleep
        self.grace = grace
        self.store_patience = store_patience
        self.owner = f"{uuid.uuid4().hex[:12]}"
        self.stats = WorkerStats()
        self._held: dict[str, _Held] = {}
        self._db = ThreadPoolExecutor(max_workers=1, thread_name_prefix="jobkeeper-store")
        self._pool: Executor | None = None
        self._threads: Executor | None = None
        self._local_slots = asyncio.Semaphore(concurrency)
        self._finishing: list[tuple[Completion, asyncio.Future[bool]]] = []
        self._finisher: asyncio.Task[None] | None = None
        self._wake_finisher = asyncio.Event()
        self._stopping = asyncio.Event()
        self._wake = asyncio.Event()
        self._backends: dict[str, Backend] = {}
        self._local: dict[str, bool] = {}

    # -- plumbing -----------------------------------------------------------------------

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

    def _executor(self, task: Task) -> Executor:
        if task.circuit.num_qubits <= SMALL_CIRCUIT_QUBITS or self.local_executor != "process":
            # Handing a small simulation to another process costs more than running it:
            # it runs on a thread (numpy leaves the GIL in its inner loops anyway).
            if self._threads is None:
                self._threads = ThreadPoolExecutor(max_workers=self.concurrency)
            return self._threads
        if self._pool is None:
            self._pool = ProcessPoolExecutor(
                max_workers=self.concurrency, initializer=one_blas_thread
            )
        return self._pool

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
        self._finisher = asyncio.create_task(self._finish_loop())
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
        return self.stats

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
        claims = await self._store(
            self.store.claim,
            self.owner,
            limit=min(free, 64),
            lease_seconds=self.lease.lease,
            backends=self.backends,
            ids=self.ids,
        )
        for claim in claims:
            held = _Held(claim)
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

    # -- one job ----------------------------------------------------------------------------

    async def _handle(self, held: _Held) -> None:
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
            self._pool = None
            await self._retry(held, exc, None)
        except Exception as exc:  # a bug in a backend must fail its job, not the worker
            log.exception("job %s: unexpected error", job.id)
            await self._fail(held, exc)
        finally:
            self._held.pop(job.id, None)
            self._wake.set()

    async def _start(self, held: _Held, backend: Backend) -> None:
        claim = held.claim
        task = build_task(claim.job)
        if self._is_local(claim.job.spec.backend, backend):
            local = cast(LocalBackend, backend)
            if _runs_inline(task, local):
                result = local.execute(task)
            else:
                async with self._local_slots:
                    loop = asyncio.get_running_loop()
                    executor = self._executor(task)
                    result = await loop.run_in_executor(executor, run_local, local, task)
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

    async def _poll(self, held: _Held, backend: Backend) -> None:
        claim = held.claim
        assert claim.job.handle is not None
        with collect_tries(held.tries):
            polled = await backend.poll(claim.job.handle)
        await self._record_tries(held)
        self.stats.polls += 1
        if polled.state == "done" and polled.result is not None:
            await self._archive(held, backend, polled.result)
        elif polled.state == "waiting":
            delay = self.poll.next_delay(self._poll_count(claim), hint=polled.poll_after)
            await self._store(self.store.snooze, claim.job.id, claim.token, delay)
        elif polled.state == "cancelled":
            await self._store(self.store.mark_cancelled, claim.job.id, claim.token)
            self.stats.cancelled += 1
        else:
            raise PermanentBackendError(polled.message or "the device reported the job failed")

    def _poll_count(self, claim: Claim) -> int:
        # Polls so far, estimated from how long the job has waited: no extra column needed,
        # and a restarted worker continues the same back-off.
        waited = max(0.0, claim.job.updated_at - (claim.job.started_at or claim.job.updated_at))
        count, total = 0, 0.0
        while total < waited and count < 64:
            total += self.poll.next_delay(count)
            count += 1
        return count

    async def _archive(self, held: _Held, backend: Backend, result: Result) -> None:
        claim = held.claim
        # Most jobs succeed at the first try: only read their history when there is one.
        attempts = (
            await self._store(self.store.attempts, claim.job.id)
            if claim.job.attempts or held.tried_in_call
            else []
        )
        completion = self.sealer.seal(claim, result, backend.info, attempts)
        future: asyncio.Future[bool] = asyncio.get_running_loop().create_future()
        held.archiving = True
        self._finishing.append((completion, future))
        self._wake_finisher.set()
        if await future:
            self.stats.done += 1
        else:
            raise LeaseLost(f"job {claim.job.id}: lease lost before archiving")

    async def _finish_loop(self) -> None:
        while True:
            await self._wake_finisher.wait()
            self._wake_finisher.clear()
            if len(self._finishing) < GROUP_COMMIT and len(self._held) > len(self._finishing):
                # Others are about to finish: a few milliseconds' wait lets one synced
                # commit carry them all (the sync, not the SQL, is what a commit costs).
                await asyncio.sleep(GROUP_COMMIT_WAIT)
            batch, self._finishing = self._finishing, []
            if not batch:
                continue
            try:
                oks = await self._store(
                    self.store.finish, [c for c, _ in batch], self.sealer.appender
                )
            except Exception as exc:
                for _, future in batch:
                    if not future.done():
                        future.set_exception(exc)
                continue
            for (_, future), ok in zip(batch, oks, strict=True):
                if not future.done():
                    future.set_result(ok)

    async def _record_tries(self, held: _Held) -> None:
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

    async def _retry(self, held: _Held, exc: BaseException, hint: float | None) -> None:
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
        if state == JobState.FAILED:
            self.stats.failed += 1
        else:
            self.stats.retried += 1

    async def _fail(self, held: _Held, exc: BaseException) -> None:
        claim = held.claim
        try:
            await self._record_tries(held)
            await self._store(
                self.store.fail, claim.job.id, claim.token, type(exc).__name__, str(exc)
            )
            self.stats.failed += 1
        except LeaseLost:
            self.stats.lost_leases += 1

    async def _shutdown(self) -> None:
        pending = [h.task for h in self._held.values() if h.task is not None]
        if pending:
            _, still = await asyncio.wait(pending, timeout=self.grace)
            for task in still:
                task.cancel()
            if still:
                await asyncio.wait(still, timeout=5.0)
        if self._finisher is not None:
            self._finisher.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await self._finisher
        for backend in self._backends.values():
            with contextlib.suppress(Exception):
                await backend.aclose()
        for pool in (self._pool, self._threads):
            if pool is not None:
                pool.shutdown(wait=True, cancel_futures=True)
        self._pool = self._threads = None
        self._db.shutdown(wait=True)
