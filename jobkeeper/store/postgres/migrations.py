"""Numbered schema migrations of a PostgreSQL archive (the statements are in
:mod:`jobkeeper.store.sql`, shared with SQLite, plus ``PG_EXTRAS``)."""

from __future__ import annotations

from psycopg import sql as pg_sql

from jobkeeper.exceptions import ConfigError, StoreUnavailable
from jobkeeper.store import sql
from jobkeeper.store.postgres.database import Database
from jobkeeper.store.postgres.dialect import dialect

#: First key of the transaction-level advisory lock that serialises migrations of one
#: schema (the second is a hash of the schema name).
MIGRATION_LOCK = 0x6A6B6D67  # "jkmg"


def migrate(db: Database, *, create: bool) -> int:
    """Bring the schema to ``sql.SCHEMA_VERSION`` in one transaction, under a
    transaction-level advisory lock so workers starting at once do not race. Returns the
    version found before."""
    conn = db.connect()
    try:
        with db.map_errors("cannot prepare the archive"), conn.transaction():
            conn.execute(dialect(sql.PG_MIGRATION_LOCK), (MIGRATION_LOCK, db.schema))
            if db.schema is not None and create:
                conn.execute(pg_sql.SQL(sql.PG_CREATE_SCHEMA).format(pg_sql.Identifier(db.schema)))
            here = conn.execute(dialect(sql.PG_WHERE_AM_I)).fetchone()
            if here is None or here[0] is None:
                raise ConfigError(
                    f"the search path of {db.where} ({here[1] if here else '?'}) names no "
                    "existing schema: create the schema first (CREATE SCHEMA name)"
                )
            row = conn.execute(dialect(sql.PG_HAS_META)).fetchone()
            if not (row and row[0]):
                if not create:
                    where = f"{db.where} (schema {here[0]})"
                    raise StoreUnavailable(
                        f"no archive at {where} (run 'jobkeeper init --store URL' first)"
                    )
                conn.execute(dialect(sql.CREATE_META))
            found = conn.execute(dialect(sql.GET_META), ("schema_version",)).fetchone()
            version = int(found[0]) if found else 0
            if version > sql.SCHEMA_VERSION:
                raise ConfigError(
                    f"the archive at {db.where} has schema version {version}, newer than "
                    f"this jobkeeper understands ({sql.SCHEMA_VERSION}); upgrade jobkeeper"
                )
            for step in range(version, sql.SCHEMA_VERSION):
                for statement in sql.MIGRATIONS[step] + sql.PG_EXTRAS.get(step, []):
                    conn.execute(statement.encode())
            if version != sql.SCHEMA_VERSION:
                conn.execute(dialect(sql.SET_META), ("schema_version", str(sql.SCHEMA_VERSION)))
        return version
    finally:
        conn.close()
