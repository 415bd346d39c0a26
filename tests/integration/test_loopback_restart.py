"""A device restart while jobs wait on it: with its state in a SQLite file the loopback
device still knows them and each runs once; without, jobkeeper fails them saying the
device forgot them, and submits nothing again on its own (README, "What jobkeeper does
on each kind of failure")."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
from pathlib import Path

from jobkeeper import Keeper
from jobkeeper.loopback.testing import running_device
from tests.integration.helpers import REPO, circuit_text, jobkeeper_cmd, start_worker, wait_for
from tests.integration.test_rest_worker import rest_keep


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def _all_waiting(keep: Path, ids: list[str]) -> bool:
    with Keeper.open(keep) as keeper:
        return all(r.state == "waiting" and r.handle for r in keeper.store.get_many(ids))


def _submit_until_waiting(keep: Path, count: int, env: dict[str, str]) -> list[str]:
    with Keeper.open(keep) as keeper:
        ids = [keeper.submit(circuit_text(0.1 * i), backend="dev", shots=64, seed=i).id
               for i in range(count)]  # fmt: skip
    worker = start_worker(keep, "--in-flight", "32")
    try:
        assert wait_for(lambda: _all_waiting(keep, ids), timeout=60)
    finally:
        worker.send_signal(signal.SIGTERM)
        worker.communicate(timeout=30)
    return ids


def _drain(keep: Path, env: dict[str, str]) -> None:
    subprocess.run(
        jobkeeper_cmd("worker", "--once", "--keep", str(keep)),
        capture_output=True, env=env, cwd=REPO, timeout=120, check=False,
    )  # fmt: skip


def test_a_device_restarted_on_its_state_file_keeps_every_waiting_job(
    tmp_path: Path, monkeypatch
) -> None:
    state, port = str(tmp_path / "device.sqlite"), _free_port()
    options = {"queue_delay": 3.0, "state": state, "port": port}
    with running_device(**options) as device:  # type: ignore[arg-type]
        monkeypatch.setenv(device.token_env, device.token)
        env = {**os.environ, device.token_env: device.token}
        keep = rest_keep(tmp_path, device)
        ids = _submit_until_waiting(keep, 12, env)
        assert device.stats()["executions"] == 0  # none has run: they wait on the device
    with running_device(**options) as device:  # type: ignore[arg-type]
        _drain(keep, env)
        stats = device.stats()
        sampled = {job.id: job.outcome for job in device.device.jobs()}
    assert stats["executions"] == 12 and stats["duplicates"] == 0
    assert stats["payload_duplicates"] == 0 and stats["submits"] == 0  # nothing sent again
    with Keeper.open(keep) as keeper:
        for record in keeper.store.get_many(ids):
            job = keeper.job(record.id)
            assert job.state == "done", record.error
            assert sampled[record.handle or ""] == ("counts", dict(job.counts))


def test_a_device_that_forgot_its_jobs_fails_them_and_sends_nothing_again(
    tmp_path: Path, monkeypatch
) -> None:
    port = _free_port()
    with running_device(queue_delay=3.0, port=port) as device:
        monkeypatch.setenv(device.token_env, device.token)
        env = {**os.environ, device.token_env: device.token}
        keep = rest_keep(tmp_path, device)
        ids = _submit_until_waiting(keep, 3, env)
    with running_device(queue_delay=3.0, port=port) as device:  # state in memory: gone
        _drain(keep, env)
        stats = device.stats()
    assert stats["submits"] == 0 and stats["executions"] == 0
    with Keeper.open(keep) as keeper:
        for record in keeper.store.get_many(ids):
            assert record.state == "failed"
            assert "the device no longer knows this job (404" in (record.error or "")
