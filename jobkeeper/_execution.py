"""Running a job's work: turning an archived job into a backend task, and running local
simulations (on the event loop, a thread or a process) for the worker.

The worker runs from the job's archived spec alone (canonical circuit text, shots, the
seed resolved at submission, options), never from the user's files: what ran is exactly
what the manifest says.
"""

from __future__ import annotations

import asyncio
import concurrent.futures
import ctypes
import multiprocessing
import os
import signal
import sys
import threading
import time
from collections.abc import Coroutine
from concurrent.futures import Executor, ProcessPoolExecutor, ThreadPoolExecutor
from typing import Any, Literal, TypeVar

from jobkeeper.backend import LocalBackend, Result, Task
from jobkeeper.circuit.canonical_read import read_canonical
from jobkeeper.store import JobRecord

T = TypeVar("T")

#: Circuits this small are simulated on a thread of the worker, larger ones in a process.
SMALL_CIRCUIT_QUBITS = 10
#: Circuits this small run on the event loop itself when their backend says it is quick
#: at that size (``inline_qubits``, see LocalBackend): less than handing them to a thread
#: costs (the hand-off and the contention for the interpreter lock were measured at a
#: third of the worker's time on 2-qubit jobs). The operation bound, and at most one
#: measurement or reset per qubit, keep the loop from being held for long.
INLINE_OPERATIONS = 256


def build_task(job: JobRecord) -> Task:
    spec = job.spec
    circuit = read_canonical(spec.circuit_text, filename=f"job {job.id}")
    return Task(
        circuit=circuit,
        shots=spec.shots,
        seed=spec.seed,
        exact=spec.exact,
        options=dict(spec.options),
        circuit_text=spec.circuit_text,
    )


def run_coroutine(coro: Coroutine[Any, Any, T]) -> T:
    """Run a coroutine to the end, also from inside a running event loop (a notebook):
    there it runs on a fresh loop in a helper thread."""
    try:
        asyncio.get_running_loop()
    except RuntimeError:
        return asyncio.run(coro)
    with concurrent.futures.ThreadPoolExecutor(max_workers=1) as pool:
        return pool.submit(asyncio.run, coro).result()


def pool_process_setup(parent: int) -> None:
    """Process-pool initializer. The process ends with its parent (:func:`die_with_parent`)
    and takes the default action on SIGTERM (a forked child inherits the worker's
    handler, which only wakes the worker's event loop: the child would ignore SIGTERM);
    Ctrl-C is the worker's to handle. One BLAS thread per process: the pool already runs
    one simulation per core; BLAS threads on top of that fight for the same cores (small
    matrix products were measured 5-20x slower so on a busy 2-core machine)."""
    signal.set_wakeup_fd(-1)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    die_with_parent(parent)
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=1, user_api="blas")


#: prctl(2) option: the signal this process gets when its parent dies (linux/prctl.h).
PR_SET_PDEATHSIG = 1
#: How often a process without that option looks whether its parent is still there.
PARENT_WATCH_SECONDS = 0.5


def die_with_parent(parent: int) -> None:
    """End this process when ``parent`` dies, however it dies (SIGKILL included): a pool
    process left behind would hold the archive open and use memory for nothing. On Linux
    the kernel sends SIGKILL when the parent ends (prctl PR_SET_PDEATHSIG); elsewhere a
    daemon thread sees the parent's id change (the process is handed to another parent)
    and exits. A parent already gone by now is caught by the same check."""
    armed = False
    if sys.platform.startswith("linux"):
        try:
            libc = ctypes.CDLL(None, use_errno=True)
            armed = libc.prctl(PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0) == 0
        except (OSError, AttributeError):
            armed = False
    if os.getppid() != parent:
        os._exit(1)
    if not armed:
        threading.Thread(target=_watch_parent, args=(parent,), daemon=True).start()


def _watch_parent(parent: int) -> None:
    while os.getppid() == parent:
        time.sleep(PARENT_WATCH_SECONDS)
    os._exit(1)


def run_local(backend: LocalBackend, task: Task) -> Result:
    """Module-level so a process pool can pickle it."""
    return backend.execute(task)


def runs_inline(task: Task, backend: LocalBackend) -> bool:
    """Whether ``task`` is small enough to run on the event loop itself."""
    limit = getattr(backend, "inline_qubits", 0)
    circuit = task.circuit
    if not isinstance(limit, int) or circuit.num_qubits > limit:
        return False
    if len(circuit.operations) > INLINE_OPERATIONS:
        return False
    collapsing = sum(1 for op in circuit.operations if op.name in ("measure", "reset"))
    return collapsing <= circuit.num_qubits


class LocalRunner:
    """Runs local simulations for one worker: at most ``slots`` at once, tiny ones on the
    loop, small ones on threads, large ones in processes (``executor="thread"``: never in
    processes). Pools are made when first needed."""

    def __init__(self, slots: int, executor: Literal["process", "thread"] = "process") -> None:
        self.slots = slots
        self.executor = executor
        self._pool: Executor | None = None
        self._threads: Executor | None = None
        self._free = asyncio.Semaphore(slots)

    async def run(self, backend: LocalBackend, task: Task) -> Result:
        if runs_inline(task, backend):
            return backend.execute(task)
        async with self._free:
            loop = asyncio.get_running_loop()
            return await loop.run_in_executor(self._executor(task), run_local, backend, task)

    def _executor(self, task: Task) -> Executor:
        if task.circuit.num_qubits <= SMALL_CIRCUIT_QUBITS or self.executor != "process":
            # Handing a small simulation to another process costs more than running it:
            # it runs on a thread (numpy leaves the GIL in its inner loops anyway).
            if self._threads is None:
                self._threads = ThreadPoolExecutor(max_workers=self.slots)
            return self._threads
        if self._pool is None:
            # The start method is chosen, not left to the Python version's default: a pool
            # process's parent must be this process for die_with_parent (a fork server in
            # between would be the parent instead). Fork where it is safe (Linux).
            method = "fork" if sys.platform.startswith("linux") else "spawn"
            self._pool = ProcessPoolExecutor(
                max_workers=self.slots,
                mp_context=multiprocessing.get_context(method),
                initializer=pool_process_setup,
                initargs=(os.getpid(),),
            )
        return self._pool

    def drop_broken_pool(self) -> None:
        """A process of the pool died: the next large simulation starts a new pool."""
        self._pool = None

    def shutdown(self) -> None:
        for pool in (self._pool, self._threads):
            if pool is not None:
                pool.shutdown(wait=True, cancel_futures=True)
        self._pool = self._threads = None
