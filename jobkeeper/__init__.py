"""jobkeeper: submit, keep and prove quantum circuit runs.

The public API (also listed in ``__all__`` and checked by tests/unit/test_public_api.py)::

    from jobkeeper import Keeper
    keeper = Keeper.open(".jobkeeper")
    job = keeper.run("bell.qasm", shots=1000, seed=7)
    job.counts
"""

from __future__ import annotations

from jobkeeper._version import __version__
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
from jobkeeper.keeper import Job, Keeper, Submitted
from jobkeeper.spec import JobSpec, job_key

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
