"""The shared statements of :mod:`jobkeeper.store.sql` in PostgreSQL's dialect, and the
pipelined way to run one statement for many rows."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from jobkeeper.store import sql
from jobkeeper.store.postgres.database import Conn


def translate(statement: str, **extra: Any) -> str:
    """A shared query in PostgreSQL's dialect: the database clock for ``{now}``, the
    extra slots filled, ``%s`` placeholders for ``?``."""
    text = statement.replace("{now}", sql.PG_NOW).replace("{labels}", sql.PG_LABELS)
    if extra:
        text = text.format(**extra)
    return text.replace("%", "%%").replace("?", "%s")


_CACHE: dict[str, bytes] = {}


def dialect(statement: str) -> bytes:
    """A shared statement in PostgreSQL's dialect, encoded (cached: the hot ones run
    often)."""
    text = _CACHE.get(statement)
    if text is None:
        text = _CACHE[statement] = translate(statement).encode()
    return text


def each_row(conn: Conn, statement: bytes, rows: Sequence[Sequence[Any]]) -> list[Any]:
    """Run one statement once per row in a single pipelined round trip; the first row each
    run returned (None when it returned none)."""
    out: list[Any] = []
    if not rows:
        return out
    with conn.cursor() as cur:
        cur.executemany(statement, rows, returning=True)
        while True:
            out.append(cur.fetchone())
            if not cur.nextset():
                break
    return out
