"""Store faults: a full disk, an I/O error, a damaged or read-only archive. Whatever store
write meets the fault, the caller gets one StoreFault (exit 3), no job is marked failed
for it, the connection is left with no half-open transaction, and once the fault is gone
a worker finishes every job exactly once and the log verifies.

The faults are injected at every statement the store runs (a connection proxy), and made
real by SQLite itself (``PRAGMA max_page_count``: SQLite then answers SQLITE_FULL as on a
full disk). Result codes: SQLITE_FULL 13, SQLITE_IOERR 10, SQLITE_READONLY 8, SQLITE_CORRUPT
11 (sqlite.org/rescode.html)."""

from __future__ import annotations

import sqlite3
from pathlib import Path
from typing import Any

import pytest

from jobkeeper import Keeper
from jobkeeper.exceptions import StoreFault
from jobkeeper.queue import LeasePolicy
from jobkeeper.store.sqlite import SqliteStore
from jobkeeper.store.sqlite_edge import fault_of
from tests.integration.helpers import circuit_text

JOBS = 3
#: Short leases, so jobs a faulted worker held are back in the queue at once.
FAST = LeasePolicy(lease=0.2, heartbeat=0.05, expiry_check=0.05)
#: The two faults injected: SQLite's own message and primary code for each, and whether
#: SQLite has already rolled the transaction back when it reports it (a full disk at
#: commit, an I/O error: sqlite.org/lang_transaction.html, "Response To Errors").
FAULTS = {
    "full": ("database or disk is full", 13, False),
    "ioerr": ("disk I/O error", 10, True),
}


def _error(kind: str) -> sqlite3.OperationalError:
    message, code, _ = FAULTS[kind]
    exc = sqlite3.OperationalError(message)
    exc.sqlite_errorcode = code  # type: ignore[attr-defined]
    return exc


class FaultyConnection:
    """A connection that fails at its ``fail_at``-th statement (counted from 1) with the
    given fault, and at every statement after it while ``stuck``; None fails nothing."""

    def __init__(self, real: sqlite3.Connection, kind: str, fail_at: int | None) -> None:
        self.real = real
        self.kind = kind
        self.fail_at = fail_at
        self.count = 0
        self.stuck = False
        self.failed = 0

    def _step(self) -> None:
        self.count += 1
        if self.stuck or (self.fail_at is not None and self.count == self.fail_at):
            self.failed += 1
            if FAULTS[self.kind][2] and self.real.in_transaction:
                self.real.execute("ROLLBACK")  # SQLite ended the transaction itself
            raise _error(self.kind)

    def execute(self, *args: Any) -> Any:
        self._step()
        return self.real.execute(*args)

    def executemany(self, *args: Any) -> Any:
        self._step()
        return self.real.executemany(*args)

    def __getattr__(self, name: str) -> Any:
        return getattr(self.real, name)


def _inject(keeper: Keeper, kind: str, fail_at: int | None) -> FaultyConnection:
    store = keeper.store
    assert isinstance(store, SqliteStore)
    real = store._conn  # the test's hook on the store's one connection
    proxy = FaultyConnection(getattr(real, "real", real), kind, fail_at)
    store._conn = proxy  # type: ignore[assignment]
    return proxy


def _heal(keeper: Keeper) -> None:
    store = keeper.store
    assert isinstance(store, SqliteStore)
    conn = store._conn
    store._conn = getattr(conn, "real", conn)
    assert not store._conn.in_transaction  # no half-open transaction left


def _work(keeper: Keeper) -> None:
    keeper.work(once=True, slots=1, lease=FAST, local_executor="thread", idle_sleep=0.02)


def _statements(tmp_path: Path, step: str) -> int:
    """How many statements ``step`` (submit or work) runs on a fresh keep with no fault."""
    with Keeper.open(tmp_path / "count") as keeper:
        if step == "work":
            keeper.submit_many([circuit_text(0.1 * i) for i in range(JOBS)], shots=32)
        proxy = _inject(keeper, "full", None)
        if step == "work":
            _work(keeper)
        else:
            keeper.submit_many([circuit_text(0.1 * i) for i in range(JOBS)], shots=32)
        return proxy.count


@pytest.fixture(scope="module")
def counted(tmp_path_factory: pytest.TempPathFactory) -> dict[str, int]:
    base = tmp_path_factory.mktemp("statements")
    return {step: _statements(base / step, step) for step in ("submit", "work")}


def _states(keeper: Keeper) -> list[str]:
    return sorted(job.state for job in keeper.jobs())


@pytest.mark.parametrize("kind", sorted(FAULTS))
def test_a_fault_at_any_statement_of_a_worker_fails_no_job(
    tmp_path: Path, kind: str, counted: dict[str, int]
) -> None:
    total = counted["work"]
    assert total > 10  # claims, renewals, attempts' reads, results, log entries
    faults_seen = 0
    for fail_at in range(1, total + 1):  # bounded: one run per statement of a clean run
        keep = tmp_path / f"{kind}-{fail_at}"
        with Keeper.open(keep) as keeper:
            jobs = keeper.submit_many([circuit_text(0.1 * i) for i in range(JOBS)], shots=32)
            proxy = _inject(keeper, kind, fail_at)
            try:
                _work(keeper)
            except StoreFault as exc:
                faults_seen += 1
                assert "no job was marked failed" in str(exc)
            assert proxy.failed <= 1  # the worker stopped at the first fault
            _heal(keeper)
            assert "failed" not in _states(keeper), (fail_at, _states(keeper))
            _work(keeper)  # the fault is gone: everything is done, once
            assert _states(keeper) == ["done"] * JOBS, fail_at
            entries = keeper.store.log_entries()
            assert sorted(e.job_id for e in entries) == sorted(s.job.id for s in jobs)
            report = keeper.verify()
            assert report.ok, (fail_at, report.problems)
    assert faults_seen >= total - 2  # all but a read-only tail (the drained check) fault


@pytest.mark.parametrize("kind", sorted(FAULTS))
def test_a_fault_at_any_statement_of_a_submission_leaves_nothing_half_done(
    tmp_path: Path, kind: str, counted: dict[str, int]
) -> None:
    total = counted["submit"]
    for fail_at in range(1, total + 1):
        with Keeper.open(tmp_path / f"{kind}-{fail_at}") as keeper:
            _inject(keeper, kind, fail_at)
            with pytest.raises(StoreFault):
                keeper.submit_many([circuit_text(0.1 * i) for i in range(JOBS)], shots=32)
            _heal(keeper)
            assert keeper.jobs() == []  # one transaction: all or nothing
            keeper.submit_many([circuit_text(0.1 * i) for i in range(JOBS)], shots=32)
            assert _states(keeper) == ["queued"] * JOBS


def test_a_rollback_that_fails_too_leaves_a_fresh_connection(tmp_path: Path) -> None:
    with Keeper.open(tmp_path / "keep") as keeper:
        proxy = _inject(keeper, "full", 3)

        def rollback_fails(*args: Any) -> Any:
            proxy._step()
            if str(args[0]).upper().startswith("ROLLBACK"):
                raise _error("ioerr")
            return proxy.real.execute(*args)

        proxy.execute = rollback_fails  # type: ignore[method-assign]
        with pytest.raises(StoreFault, match="disk is full"):  # the first error, not the second
            keeper.submit_many([circuit_text(0.1 * i) for i in range(JOBS)], shots=32)
        store = keeper.store
        assert isinstance(store, SqliteStore)
        assert store._conn is not proxy  # closed and opened afresh
        keeper.submit_many([circuit_text(0.1 * i) for i in range(JOBS)], shots=32)
        assert _states(keeper) == ["queued"] * JOBS


def test_sqlite_own_full_answer_stops_the_worker_and_fails_nothing(tmp_path: Path) -> None:
    keep = tmp_path / "keep"
    with Keeper.open(keep) as keeper:
        keeper.submit_many([circuit_text(0.01 * i) for i in range(200)], shots=32)
        store = keeper.store
        assert isinstance(store, SqliteStore)
        conn = store._conn
        pages = conn.execute("PRAGMA page_count").fetchone()[0]
        # SQLite's documented cap on the database's size in pages (sqlite.org/pragma.html)
        conn.execute(f"PRAGMA max_page_count = {pages + 2}")
        with pytest.raises(StoreFault, match="disk is full"):
            _work(keeper)
        assert not conn.in_transaction
        states = _states(keeper)
        assert "failed" not in states and states.count("done") < 200
        conn.execute("PRAGMA max_page_count = 1073741823")
        _work(keeper)
        assert _states(keeper) == ["done"] * 200
        assert keeper.verify().ok


@pytest.mark.parametrize(
    ("code", "words"),
    [(13, "disk is full"), (10, "I/O error"), (8, "read-only"), (11, "damaged"), (26, "not a")],
)
def test_each_fault_code_has_its_words(code: int, words: str) -> None:
    exc = sqlite3.OperationalError("x")
    exc.sqlite_errorcode = code  # type: ignore[attr-defined]
    fault = fault_of(exc, "cannot write the archive")
    assert fault is not None and words in str(fault) and fault.exit_code == 3
    busy = sqlite3.OperationalError("database is locked")
    busy.sqlite_errorcode = 5  # type: ignore[attr-defined]
    assert fault_of(busy, "x") is None  # busy is waited for, not a fault
