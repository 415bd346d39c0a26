"""Shared fixtures.

``../shared`` (public corpus circuits and published test vectors) sits beside the
checkout for developers and CI, and is absent in a user's fresh clone: tests that need it
skip there with a clear reason, and must run (not skip) when ``CI=true``.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
SHARED = REPO.parent / "shared"
IN_CI = os.environ.get("CI", "").lower() == "true"


def shared_path(*parts: str) -> Path:
    """A path under ../shared, or a skip (a failure under CI=true) when it is absent."""
    path = SHARED.joinpath(*parts)
    if not path.exists():
        reason = f"{path} is absent (it sits beside the checkout for developers and CI only)"
        if IN_CI:
            pytest.fail(f"CI=true but {reason}")
        pytest.skip(reason)
    return path


@pytest.fixture
def corpus_dir() -> Path:
    return shared_path("corpus", "qasm")


@pytest.fixture
def vectors_dir() -> Path:
    return shared_path("vectors")


# -- stores: one contract suite, run against every implementation ---------------------------

POSTGRES_URL = os.environ.get(
    "JOBKEEPER_TEST_POSTGRES", "postgresql://postgres@127.0.0.1:5432/test"
)


def postgres_available() -> bool:
    try:
        import psycopg

        with psycopg.connect(POSTGRES_URL, connect_timeout=3):
            return True
    except Exception:
        return False


def require_postgres() -> str:
    """The test server's URL, or a skip (a failure under CI=true) when it is unreachable."""
    if postgres_available():
        return POSTGRES_URL
    reason = f"no PostgreSQL server reachable at {POSTGRES_URL}"
    if IN_CI:
        pytest.fail(f"CI=true but {reason}")
    pytest.skip(reason)
