"""Archives written by the previous release (jobkeeper 0.1.0, schema 2; see data/README.md)
open with this one: numbered migrations applied in order (common practice), every row
kept, every signature still verifying, labels turned into sets, the queued job runnable."""

from __future__ import annotations

import os
import shutil
import sqlite3
import uuid
from collections.abc import Iterator
from pathlib import Path

import psycopg
import pytest

from jobkeeper import Keeper
from jobkeeper.store import sql
from tests.conftest import require_postgres
from tests.postgres_fixtures import drop_schema, schema_url

DATA = Path(__file__).parent / "data" / "release-0.1.0"
BELL = (
    'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c[2];\nh q[0];\ncx q[0],q[1];\n'
    "measure q -> c;\n"
)


def copy_keep(name: str, to: Path) -> Path:
    keep = to / "keep"
    shutil.copytree(DATA / name, keep)
    os.chmod(keep / "keys", 0o700)  # git keeps no modes: the key must be private again
    for key in (keep / "keys").glob("*.key"):
        os.chmod(key, 0o600)
    return keep


@pytest.fixture(params=["sqlite", "postgres"])
def release_keep(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[tuple[Path, str]]:
    if request.param == "sqlite":
        keep = copy_keep("sqlite-keep", tmp_path)
        yield keep, str(keep / "archive.db")
        return
    url = require_postgres()
    schema = f"t_{uuid.uuid4().hex[:12]}"
    dump = (DATA / "postgres-archive.sql").read_text().replace("jk_release_v2", schema)
    with psycopg.connect(url, autocommit=True) as conn:
        conn.execute(dump.encode())
    try:
        yield copy_keep("postgres-keep", tmp_path), schema_url(url, schema)
    finally:
        drop_schema(url, schema)


def test_a_release_archive_migrates_keeping_rows_signatures_and_labels(
    release_keep: tuple[Path, str],
) -> None:
    keep, store = release_keep
    with Keeper.open(keep, store=store, create=False) as keeper:
        assert keeper.store.get_meta("schema_version") == str(sql.SCHEMA_VERSION)
        jobs = keeper.jobs()
        assert [(j.state, j.record.labels) for j in jobs] == [
            ("done", ("fig2",)), ("done", ("fig3",)), ("done", ()), ("done", ("flaky",)),
            ("queued", ("later",)),
        ]  # fmt: skip
        assert keeper.verify().ok  # every envelope, inclusion and checkpoint holds
        flaky = jobs[3]
        assert [(a.number, a.in_call) for a in flaky.attempts] == [(1, False), (2, False)]
        assert flaky.record.attempts == 2
        # The Bell job of "fig2", submitted again for "fig3": now it carries both labels.
        again = keeper.submit(BELL, shots=200, seed=7, labels={"fig3"})
        assert again.id == jobs[0].id and again.record.labels == ("fig2", "fig3")
        assert {j.id for j in keeper.jobs(label="fig3")} == {jobs[0].id, jobs[1].id}
        keeper.work(once=True)
        assert keeper.job(jobs[4].id).state == "done"
        assert keeper.verify().ok
    with Keeper.open(keep, store=store, create=False) as keeper:  # opening again: no-op
        assert len(keeper.jobs()) == 5


def test_a_sqlite_archive_whose_version_lies_is_refused_unchanged(tmp_path: Path) -> None:
    from jobkeeper.exceptions import StoreError
    from jobkeeper.store.sqlite import SqliteStore

    keep = copy_keep("sqlite-keep", tmp_path)
    path = keep / "archive.db"
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("ALTER TABLE results ADD COLUMN stray TEXT")  # a change by hand
    conn.close()
    with pytest.raises(StoreError, match="columns of results differ"):
        SqliteStore(path)
    conn = sqlite3.connect(path, isolation_level=None)
    version = conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
    tables = {row[0] for row in conn.execute("SELECT name FROM sqlite_master")}
    conn.close()
    assert version == ("2",) and "job_labels" not in tables  # rolled back, as it was
