"""Forward migrations: an archive written at schema 1 opens at the current schema with
every row kept (numbered migrations applied in order: common practice)."""

from __future__ import annotations

import sqlite3
from pathlib import Path

from jobkeeper.store import sql
from jobkeeper.store.sqlite import SqliteStore


def test_schema_1_archive_migrates_forward_keeping_its_rows(tmp_path: Path) -> None:
    path = tmp_path / "archive.db"
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT)")
    for statement in sql.MIGRATIONS[0]:
        conn.execute(statement.replace("BYTEA", "BLOB"))
    conn.execute("INSERT INTO meta VALUES ('schema_version', '1')")
    conn.execute(
        "INSERT INTO jobs (id, job_key, state, backend, shots, repeat, spec, created_at, "
        "updated_at, not_before, max_attempts) VALUES ('ab', 'k', 'done', 'sv', 1, 0, '{}', 0, 0, 0, 1)"
    )
    conn.execute("INSERT INTO log_entries VALUES (0, 'ab', x'00', x'01', 'f', 0)")
    conn.close()
    with SqliteStore(path) as store:
        assert store.get_meta("schema_version") == str(sql.SCHEMA_VERSION)
        assert store.get("ab").state == "done"
        [entry] = store.log_entries()
        assert entry.job_id == "ab" and entry.envelope == b"\x00"
        assert store.comparisons() == []
    with SqliteStore(path) as again:  # opening twice applies nothing twice
        assert len(again.log_entries()) == 1


def test_a_newer_schema_is_refused(tmp_path: Path) -> None:
    import pytest

    from jobkeeper.exceptions import ConfigError

    path = tmp_path / "archive.db"
    SqliteStore(path).close()
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("UPDATE meta SET value = '99' WHERE key = 'schema_version'")
    conn.close()
    with pytest.raises(ConfigError, match="newer than this jobkeeper"):
        SqliteStore(path)
