"""Fixtures the integration suites share: ``store``, a fresh store of each kind (the
store contract suites run against SQLite and PostgreSQL alike)."""

from tests.store_fixtures import store

__all__ = ["store"]
