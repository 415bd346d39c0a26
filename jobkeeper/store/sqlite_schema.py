"""What a SQLite archive's schema looks like, read with sqlite-utils' introspection, and the
check that a migrated archive ended up like a new one.

A migration runs rarely and cannot be taken back once committed, so after the numbered
steps run (in the same transaction) the archive's shape — tables, their columns with
types, not-null flags, defaults and primary keys, indexes, foreign keys — is compared
with that of an empty archive built from the same steps in memory. An archive whose
``schema_version`` does not tell its history (restored from a copy, altered by hand)
is then refused with the difference named, instead of failing later on some query.
sqlite-utils is imported only here, and only when a migration ran.
"""

from __future__ import annotations

import sqlite3
from typing import Any

from jobkeeper.exceptions import StoreError
from jobkeeper.store import sql


def shape(conn: sqlite3.Connection) -> dict[str, Any]:
    """Tables → (columns, indexes, foreign keys), as sqlite-utils reads them."""
    import sqlite_utils

    db = sqlite_utils.Database(conn)
    out: dict[str, Any] = {}
    for name in sorted(db.table_names()):
        table = db.table(name)
        columns = [
            (c.name, c.type.upper(), c.notnull, c.default_value, c.is_pk) for c in table.columns
        ]
        indexes = sorted(
            (i.name, tuple(i.columns), bool(i.unique), bool(i.partial))
            for i in table.indexes
            if not i.name.startswith("sqlite_autoindex")
        )
        keys = sorted((k.column, k.other_table, k.other_column) for k in table.foreign_keys)
        out[name] = {"columns": columns, "indexes": indexes, "foreign_keys": keys}
    return out


def fresh_shape() -> dict[str, Any]:
    """The shape of an empty archive at the current schema version."""
    conn = sqlite3.connect(":memory:")
    try:
        conn.execute(sql.CREATE_META)
        for step in sql.MIGRATIONS:
            for statement in step:
                conn.execute(sqlite_dialect(statement))
        return shape(conn)
    finally:
        conn.close()


def sqlite_dialect(statement: str) -> str:
    """A migration statement as SQLite runs it (its blob type is BLOB)."""
    return statement.replace("BYTEA", "BLOB")


def check_migrated(conn: sqlite3.Connection, *, where: str, found: int) -> None:
    """Refuse (StoreError) an archive migrated from version ``found`` whose shape differs
    from a new archive's; the caller's transaction then rolls the migration back."""
    have, want = shape(conn), fresh_shape()
    if have == want:
        return
    problems = []
    for table in sorted(set(have) | set(want)):
        if table not in have:
            problems.append(f"table {table} is missing")
        elif table not in want:
            problems.append(f"table {table} is not part of the schema")
        else:
            for part in ("columns", "indexes", "foreign_keys"):
                if have[table][part] != want[table][part]:
                    problems.append(f"{part.replace('_', ' ')} of {table} differ")
    raise StoreError(
        f"the archive at {where} said schema version {found}, but after migrating to "
        f"{sql.SCHEMA_VERSION} it does not match that schema ({'; '.join(problems)}); "
        "it was left unchanged"
    )
