"""Turning an archived job into a backend task, and running a local one.

The worker runs from the job's archived description alone (canonical circuit text, shots,
seed, options), never from the user's files: what ran is exactly what the manifest says.
"""

from __future__ import annotations

from jobkeeper.backend import LocalBackend, Result, Task
from jobkeeper.circuit.canonical_read import read_canonical
from jobkeeper.hashing import digest_of
from jobkeeper.spec import effective_seed
from jobkeeper.store import JobRecord


def seed_for(job: JobRecord) -> int:
    """The seed the backend gets. A job submitted without a seed gets one derived from its
    job key: a restarted job then samples exactly what the interrupted one would have, so
    running it again after a crash cannot give a second, different answer."""
    if job.seed is not None:
        seed = effective_seed(int(job.seed), job.repeat)
        assert seed is not None
        return seed
    # 63 bits: a seed must fit a signed 64-bit integer wherever a device stores it.
    return int(digest_of({"jobKey": job.job_key}).removeprefix("sha256:")[:16], 16) >> 1


def build_task(job: JobRecord) -> Task:
    spec = job.spec
    text = str(spec["circuit"])
    circuit = read_canonical(text, filename=f"job {job.id}")
    return Task(
        circuit=circuit,
        shots=job.shots,
        seed=seed_for(job),
        exact=bool(spec.get("exact", False)),
        options=dict(spec.get("options", {})),
        circuit_text=text,
    )


def one_blas_thread() -> None:
    """Process-pool initializer: one BLAS thread per worker process. The pool already runs
    one simulation per core; BLAS threads on top of that fight for the same cores (small
    matrix products were measured 5-20x slower so on a busy 2-core machine)."""
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=1, user_api="blas")


def run_local(backend: LocalBackend, task: Task) -> Result:
    """Module-level so a process pool can pickle it."""
    return backend.execute(task)
