"""The PostgreSQL store's reading side: the shared reads of :mod:`jobkeeper.store._reads`
run as autocommit statements on a pooled connection (no transaction is held open)."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from jobkeeper.store._pg_conn import Conn, Database
from jobkeeper.store._reads import StoreReads


class PostgresReads(StoreReads):
    """Reading methods of the store; the store sets ``_db``."""

    _db: Database

    def _read(self, statement: str, params: Sequence[Any] = ()) -> list[Any]:
        # The shared SQL uses "?" placeholders (none of it has a literal question mark).
        query = statement.replace("?", "%s").encode()

        def work(conn: Conn) -> list[Any]:
            return conn.execute(query, params).fetchall()

        return self._db.run(work, write=False)
