"""Profile format 2 end to end, second shape: worker processes against the loopback device
in its ledger preset (a bare key in a header of its own, 409 naming the existing ticket
on a repeated key, per-shot arrays of 0/1 with c[0] first over numbered pages), with
faults on: 503 with Retry-After, dropped connections and answers lost after the ticket
was filed."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.loopback.testing import running_device
from tests.integration.test_rest_exchange import PROGRAM, _drain
from tests.integration.test_rest_hostile_device import keep_holds_any
from tests.integration.test_rest_worker import rest_keep


@pytest.mark.parametrize("faults", [("503",), ("drop", "lost")])
def test_ledger_preset_through_the_worker_with_faults(
    tmp_path: Path, faults: tuple[str, ...]
) -> None:
    with running_device(
        preset="ledger", queue_delay=0.3, fault_rate=0.25, faults=faults, seed=5, page_size=6
    ) as device:
        env = {**os.environ, device.token_env: device.token}
        keep = rest_keep(tmp_path, device)
        with Keeper.open(keep) as keeper:
            ids = [keeper.submit(PROGRAM.format(angle=0.2 * i), backend="dev", shots=25,
                                 seed=i).id for i in range(8)]  # fmt: skip
        proc = _drain(keep, env)
        stats = device.stats()
        sampled = {job.id: dict(job.outcome[1]) for job in device.device.jobs() if job.outcome}
    assert proc.returncode == 0, proc.stderr
    assert sum(stats["faults"].values()) > 0
    assert stats["executions"] == 8 and stats["duplicates"] == 0
    assert stats["payload_duplicates"] == 0
    with Keeper.open(keep) as keeper:
        for job_id in ids:
            job = keeper.job(job_id)
            assert job.state == "done", job.record.error
            assert dict(job.counts) == sampled[(job.record.handle or "").rsplit("job=", 1)[-1]]
    assert keep_holds_any(keep, device.token) == []


def test_a_repeated_key_meets_409_naming_the_first_ticket(tmp_path: Path) -> None:
    with running_device(preset="ledger", queue_delay=0.2, page_size=4) as device:
        env = {**os.environ, device.token_env: device.token}
        keep = rest_keep(tmp_path, device)
        with Keeper.open(keep) as keeper:
            job_id = keeper.submit(PROGRAM.format(angle=0.7), backend="dev", shots=10).id
        device.force("lost", method="POST", path="/v3/tickets")
        _drain(keep, env)
        stats = device.stats()
    assert stats["submits"] == 2 and stats["replays"] == 1 and stats["executions"] == 1
    with Keeper.open(keep) as keeper:
        job = keeper.job(job_id)
        assert job.state == "done" and sum(job.counts.values()) == 10
