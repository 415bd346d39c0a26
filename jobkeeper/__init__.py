"""jobkeeper: submit, keep and prove quantum circuit runs.

The public API (also listed in ``__all__`` and checked by tests/unit/test_public_api.py)::

    from jobkeeper import Keeper
    keeper = Keeper.open(".jobkeeper")
    job = keeper.run("bell.qasm", shots=1000, seed=7)
    job.counts
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
    from jobkeeper.keeper import Job, Keeper, Submitted
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
    "Job": "jobkeeper.keeper",
    "Keeper": "jobkeeper.keeper",
    "Submitted": "jobkeeper.keeper",
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
    "Keeper",
    "LocalBackend",
    "PermanentBackendError",
    "Polled",
    "Pricing",
    "ProvenanceError",
    "Result",
    "Started",
    "StoreError",
    "Submitted",
    "Task",
    "TransientBackendError",
    "VerificationError",
    "__version__",
    "job_key",
]
