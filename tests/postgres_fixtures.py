"""Fresh PostgreSQL archives for tests: each in a schema of its own, dropped afterwards,
so tests (and test runs) sharing one database never see each other's rows."""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from urllib.parse import quote

import psycopg
from psycopg import sql

from jobkeeper.store.postgres import PostgresStore


def schema_url(url: str, schema_name: str) -> str:
    """``url`` with the schema as its search path, for code that takes only a URL (the
    command line, worker processes): ``options=-csearch_path=<schema>``."""
    joiner = "&" if "?" in url else "?"
    return f"{url}{joiner}options={quote(f'-csearch_path={schema_name}')}"


def create_schema(url: str, schema_name: str) -> None:
    with psycopg.connect(url, autocommit=True) as conn:
        conn.execute(sql.SQL("CREATE SCHEMA IF NOT EXISTS {}").format(sql.Identifier(schema_name)))


def drop_schema(url: str, schema_name: str) -> None:
    with psycopg.connect(url, autocommit=True) as conn:
        conn.execute(
            sql.SQL("DROP SCHEMA IF EXISTS {} CASCADE").format(sql.Identifier(schema_name))
        )


@contextlib.contextmanager
def fresh_schema(url: str, schema_name: str) -> Iterator[str]:
    """An empty schema for the length of the block; yields a URL bound to it."""
    create_schema(url, schema_name)
    try:
        yield schema_url(url, schema_name)
    finally:
        drop_schema(url, schema_name)


@contextlib.contextmanager
def fresh_postgres_store(url: str, schema_name: str) -> Iterator[PostgresStore]:
    """A PostgresStore on a new, empty schema; the schema is dropped afterwards."""
    try:
        store = PostgresStore(url, schema=schema_name)
        try:
            yield store
        finally:
            store.close()
    finally:
        drop_schema(url, schema_name)
