"""The curated public API: what ``import jobkeeper`` offers is a decision, not an accident."""

import jobkeeper

EXPECTED = {
    "Backend", "BackendError", "BackendInfo", "BudgetExceeded", "CircuitError", "ConfigError",
    "Job", "JobFailed", "JobSpec", "JobkeeperError", "Judgement", "Keeper", "LocalBackend",
    "PermanentBackendError", "Polled", "PreflightReport", "Pricing", "ProvenanceError",
    "Result", "Started", "StoreError", "SubmitOptions", "Submitted", "Task",
    "TransientBackendError", "VerificationError", "VerifyReport", "__version__", "job_key",
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


def test_keeper_has_a_method_for_every_command() -> None:
    # DESIGN §2: the CLI holds no logic the Python API lacks.
    for method in ("submit", "submit_many", "run", "run_many", "work", "jobs", "job", "wait",
                   "cancel", "check", "rerun", "compare", "verify", "verify_bundle", "bundle",
                   "keys", "export", "manifest", "backend_infos"):  # fmt: skip
        assert callable(getattr(jobkeeper.Keeper, method)), method
    assert isinstance(jobkeeper.Keeper.trust, property)  # trust add/list/remove/import


def test_submit_keywords_are_the_fields_of_submit_options() -> None:
    from jobkeeper.options import SubmitFields

    assert set(SubmitFields.__annotations__) == set(jobkeeper.SubmitOptions.model_fields)
