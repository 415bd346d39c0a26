"""jobkeeper: submit, keep and prove quantum circuit runs.

The public API (also listed in ``__all__`` and checked by tests/unit/test_public_api.py)::

    from jobkeeper import Keeper
    keeper = Keeper.open(".jobkeeper")
    job = keeper.run("bell.qasm", shots=1000, seed=7)
    job.counts, job.spec.seed

Everything the command line does is a method of :class:`Keeper`: ``submit``, ``run``,
``work``, ``jobs``, ``job``, ``wait``, ``cancel``, ``check``, ``rerun``, ``compare``,
``verify``, ``verify_bundle``, ``bundle``, ``keys``, ``trust`` and ``export``.
"""

from __future__ import annotations

from importlib import import_module
from typing import TYPE_CHECKING, Any

from jobkeeper._version import __version__
from jobkeeper.exceptions import (
    BackendError,
    BudgetExceeded,
    CircuitError,
    ConfigError,
    JobFailed,
    JobkeeperError,
    PermanentBackendError,
    ProvenanceError,
    StoreError,
    TransientBackendError,
    VerificationError,
)

if TYPE_CHECKING:
    from jobkeeper.audit.judging import Judgement
    from jobkeeper.backend import (
        Backend,
        BackendInfo,
        LocalBackend,
        Polled,
        Pricing,
        Result,
        Started,
        Task,
    )
    from jobkeeper.job import Job, Submitted
    from jobkeeper.keeper import Keeper
    from jobkeeper.options import SubmitOptions
    from jobkeeper.preflight import PreflightReport
    from jobkeeper.provenance import VerifyReport
    from jobkeeper.spec import JobSpec, job_key

# Imported on first use (PEP 562): `import jobkeeper` (which every command line run does)
# must not load numpy, pydantic and the store for `jobkeeper --help`.
_LAZY = {
    "Backend": "jobkeeper.backend",
    "BackendInfo": "jobkeeper.backend",
    "LocalBackend": "jobkeeper.backend",
    "Polled": "jobkeeper.backend",
    "Pricing": "jobkeeper.backend",
    "Result": "jobkeeper.backend",
    "Started": "jobkeeper.backend",
    "Task": "jobkeeper.backend",
    "Job": "jobkeeper.job",
    "Judgement": "jobkeeper.audit.judging",
    "Keeper": "jobkeeper.keeper",
    "PreflightReport": "jobkeeper.preflight",
    "Submitted": "jobkeeper.job",
    "SubmitOptions": "jobkeeper.options",
    "VerifyReport": "jobkeeper.provenance",
    "JobSpec": "jobkeeper.spec",
    "job_key": "jobkeeper.spec",
}


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'jobkeeper' has no attribute {name!r}")
    value = getattr(import_module(module), name)
    globals()[name] = value  # once found, an ordinary attribute
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))


__all__ = [
    "Backend",
    "BackendError",
    "BackendInfo",
    "BudgetExceeded",
    "CircuitError",
    "ConfigError",
    "Job",
    "JobFailed",
    "JobSpec",
    "JobkeeperError",
    "Judgement",
    "Keeper",
    "LocalBackend",
    "PermanentBackendError",
    "Polled",
    "PreflightReport",
    "Pricing",
    "ProvenanceError",
    "Result",
    "Started",
    "StoreError",
    "SubmitOptions",
    "Submitted",
    "Task",
    "TransientBackendError",
    "VerificationError",
    "VerifyReport",
    "__version__",
    "job_key",
]
