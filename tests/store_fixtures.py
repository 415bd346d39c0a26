"""Opening a fresh store of each kind for a test."""

from __future__ import annotations

import contextlib
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest

from jobkeeper.store import Store
from jobkeeper.store.sqlite import SqliteStore
from tests.conftest import require_postgres


@contextlib.contextmanager
def make_store(kind: str, tmp_path: Path) -> Iterator[Store]:
    if kind == "sqlite":
        store = SqliteStore(tmp_path / "archive.db")
        try:
            yield store
        finally:
            store.close()
        return
    url = require_postgres()
    from tests.postgres_fixtures import fresh_postgres_store

    with fresh_postgres_store(url, f"t_{uuid.uuid4().hex[:12]}") as store:
        yield store


@pytest.fixture(params=["sqlite", "postgres"])
def store(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[Store]:
    """A fresh store of each kind: the contract suites run against both."""
    with make_store(request.param, tmp_path) as the_store:
        yield the_store
