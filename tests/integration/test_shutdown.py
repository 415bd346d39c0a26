"""Two-phase shutdown, as durable queues do it (queue-reliability notes §5, common
practice): the first SIGTERM stops claiming and lets running work finish, then the worker
exits 0 holding no lease; a second signal hands everything back at once."""

from __future__ import annotations

import signal
import time
from pathlib import Path

import pytest

from jobkeeper import Keeper
from tests.integration.helpers import circuit_text, start_worker, wait_for, write_recording_keep


def _running(keep: Path) -> int:
    with Keeper.open(keep) as keeper:
        return keeper.store.counts_by_state().get("running", 0)


@pytest.mark.slow
def test_sigterm_finishes_running_work_and_releases_the_rest(tmp_path: Path) -> None:
    keep, ledger = tmp_path / "keep", tmp_path / "ledger"
    write_recording_keep(keep, ledger, delay=1.0)
    with Keeper.open(keep) as keeper:
        keeper.submit_many([circuit_text(0.1 * i) for i in range(40)], backend="rec", shots=8)
    log = tmp_path / "w.log"
    worker = start_worker(keep, "--in-flight", "8", stderr_path=log)
    assert wait_for(lambda: _running(keep) > 0, timeout=60)
    worker.send_signal(signal.SIGTERM)
    start = time.monotonic()
    worker.communicate(timeout=60)
    assert worker.returncode == 0, log.read_text()
    assert time.monotonic() - start < 30
    with Keeper.open(keep) as keeper:
        counts = keeper.store.counts_by_state()
        assert counts.get("running", 0) == 0
        assert counts.get("done", 0) >= 8 and counts.get("queued", 0) > 0


@pytest.mark.slow
def test_a_second_signal_hands_everything_back_at_once(tmp_path: Path) -> None:
    keep, ledger = tmp_path / "keep", tmp_path / "ledger"
    write_recording_keep(keep, ledger, delay=120.0)
    with Keeper.open(keep) as keeper:
        keeper.submit_many([circuit_text(0.1 * i) for i in range(10)], backend="rec", shots=8)
    log = tmp_path / "w.log"
    worker = start_worker(keep, "--in-flight", "4", stderr_path=log)
    assert wait_for(lambda: _running(keep) == 4, timeout=60)
    worker.send_signal(signal.SIGTERM)
    time.sleep(0.3)
    worker.send_signal(signal.SIGTERM)
    worker.communicate(timeout=30)
    assert worker.returncode == 0, log.read_text()
    with Keeper.open(keep) as keeper:
        counts = keeper.store.counts_by_state()
        assert counts == {"queued": 10}, counts
