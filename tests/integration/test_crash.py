"""Crash test with real processes: 300 jobs, the worker SIGKILLed at 10 random moments
and restarted each time. Every job ends done, executed once, archived once, none lost,
and the whole log still verifies. (At-least-once delivery plus an idempotent device is
how durable queues reach exactly-once effects: queue-reliability notes §1–§2, common
practice.)"""

from __future__ import annotations

import random
import sqlite3
import subprocess
import time
from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.testing import executions, starts
from tests.integration.helpers import (
    circuit_text,
    jobkeeper_cmd,
    sigkill,
    start_worker,
    write_recording_keep,
)

JOBS = 300
KILLS = 10
FAST_LEASE = ("--lease", "1.5", "--heartbeat", "0.3", "--lease-check", "0.3")


@pytest.mark.slow
def test_sigkill_at_random_moments_loses_nothing_and_runs_nothing_twice(tmp_path: Path) -> None:
    keep, ledger = tmp_path / "keep", tmp_path / "ledger"
    write_recording_keep(keep, ledger, delay=0.02)
    with Keeper.open(keep) as keeper:
        submitted = keeper.submit_many(
            [circuit_text(0.001 * i) for i in range(JOBS)], backend="rec", shots=64
        )
        ids = [s.job.id for s in submitted]
        submitted_records = [s.job.record for s in submitted]
    rng = random.Random(20261201)
    log = tmp_path / "worker.log"
    kills = 0
    for _ in range(KILLS):
        worker = start_worker(keep, "--in-flight", "8", *FAST_LEASE, stderr_path=log)
        time.sleep(rng.uniform(0.8, 2.0))  # start-up takes most of a second
        if not sigkill(worker):
            break  # it drained everything before the kill
        kills += 1
    final = subprocess.run(
        jobkeeper_cmd("worker", "--once", "--keep", str(keep), *FAST_LEASE),
        capture_output=True, timeout=240, check=False,
    )  # fmt: skip
    assert final.returncode == 0, final.stderr.decode()
    assert kills >= 5, "the workers finished before most kills: make the jobs slower"
    with Keeper.open(keep) as keeper:
        states = {job.id: job.state for job in keeper.jobs()}
        assert len(states) == JOBS and set(states) == set(ids)
        assert set(states.values()) == {"done"}, states
        assert len(keeper.store.log_entries()) == JOBS
        assert {e.job_id for e in keeper.store.log_entries()} == set(ids)
        report = keeper.verify()
        assert report.ok, report.problems
    ran = executions(ledger)
    assert len(ran) == JOBS  # one execution per job: every restart reused the job's key
    assert set(ran) == {job.job_key for job in submitted_records}
    assert len(starts(ledger)) >= JOBS
    conn = sqlite3.connect(keep / "archive.db")
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    assert conn.execute("SELECT COUNT(*) FROM results").fetchone()[0] == JOBS
    conn.close()
    assert "database is locked" not in log.read_text(errors="replace")
