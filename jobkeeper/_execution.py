"""Turning an archived job into a backend task, and running a local one.

The worker runs from the job's archived spec alone (canonical circuit text, shots, the
seed resolved at submission, options), never from the user's files: what ran is exactly
what the manifest says.
"""

from __future__ import annotations

from jobkeeper.backend import LocalBackend, Result, Task
from jobkeeper.circuit.canonical_read import read_canonical
from jobkeeper.store import JobRecord


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


def one_blas_thread() -> None:
    """Process-pool initializer: one BLAS thread per worker process. The pool already runs
    one simulation per core; BLAS threads on top of that fight for the same cores (small
    matrix products were measured 5-20x slower so on a busy 2-core machine)."""
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=1, user_api="blas")


def run_local(backend: LocalBackend, task: Task) -> Result:
    """Module-level so a process pool can pickle it."""
    return backend.execute(task)
