"""The curated public API: what ``import jobkeeper`` offers is a decision, not an accident."""

import jobkeeper

EXPECTED = {
    "Backend", "BackendError", "BackendInfo", "BudgetExceeded", "CircuitError", "ConfigError",
    "Job", "JobFailed", "JobSpec", "JobkeeperError", "Keeper", "LocalBackend",
    "PermanentBackendError", "Polled", "Pricing", "ProvenanceError", "Result", "Started",
    "StoreError", "Submitted", "Task", "TransientBackendError", "VerificationError",
    "__version__", "job_key",
}  # fmt: skip


def test_public_names() -> None:
    assert set(jobkeeper.__all__) == EXPECTED
    for name in EXPECTED:
        assert hasattr(jobkeeper, name)


def test_every_error_is_a_jobkeeper_error_with_an_exit_code() -> None:
    from jobkeeper import exceptions

    for value in vars(exceptions).values():
        if isinstance(value, type) and issubclass(value, Exception):
            assert issubclass(value, jobkeeper.JobkeeperError)
            assert value.exit_code in (1, 2, 3)
