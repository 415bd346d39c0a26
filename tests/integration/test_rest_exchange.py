"""The profile language's format 2 end to end: worker processes against the loopback
device in its exchange preset (OAuth 2.0 client credentials with tokens that live one
second, form-encoded submissions answered with a Location, 303 on a repeated key,
numeric status codes, per-shot hexadecimal samples over pages linked by RFC 8288
headers), with faults on: 503 with Retry-After, tokens expiring early, dropped
connections and answers lost after the run was accepted."""

from __future__ import annotations

import os
import subprocess
from collections import Counter
from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.loopback.testing import CLIENT_ID, CLIENT_ID_ENV, running_device
from tests.integration.helpers import REPO, jobkeeper_cmd
from tests.integration.test_rest_hostile_device import keep_holds_any
from tests.integration.test_rest_worker import rest_keep

# two registers, so that outcomes are split by the layout: a[2] holds a Bell pair, b[1]
# a coin (an invented test circuit)
PROGRAM = """OPENQASM 2.0;
include "qelib1.inc";
qreg q[3];
creg a[2];
creg b[1];
rz({angle}) q[0];
h q[0];
cx q[0],q[1];
h q[2];
measure q[0] -> a[0];
measure q[1] -> a[1];
measure q[2] -> b[0];
"""


def _env(device) -> dict[str, str]:
    return {**os.environ, device.token_env: device.token, CLIENT_ID_ENV: CLIENT_ID}


def _drain(keep: Path, env: dict[str, str]) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        jobkeeper_cmd("worker", "--once", "--keep", str(keep), "--in-flight", "16"),
        capture_output=True, text=True, env=env, cwd=REPO, timeout=240, check=False,
    )  # fmt: skip


@pytest.mark.parametrize("faults", [("503",), ("expire",), ("drop", "lost")])
def test_exchange_preset_through_the_worker_with_faults(
    tmp_path: Path, faults: tuple[str, ...]
) -> None:
    with running_device(
        preset="exchange", queue_delay=0.3, fault_rate=0.25, faults=faults, seed=3,
        token_ttl=1.0, page_size=7,
    ) as device:  # fmt: skip
        env = _env(device)
        keep = rest_keep(tmp_path, device)
        with Keeper.open(keep) as keeper:
            ids = [keeper.submit(PROGRAM.format(angle=0.1 * i), backend="dev", shots=40,
                                 seed=i).id for i in range(8)]  # fmt: skip
        proc = _drain(keep, env)
        stats = device.stats()
        sampled = {job.id: dict(job.outcome[1]) for job in device.device.jobs() if job.outcome}
        tokens = list(device.app.issuer.issued)
    assert proc.returncode == 0, proc.stderr
    assert sum(stats["faults"].values()) > 0  # the faults happened
    assert stats["executions"] == 8 and stats["duplicates"] == 0
    assert stats["payload_duplicates"] == 0
    with Keeper.open(keep) as keeper:
        for job_id in ids:
            job = keeper.job(job_id)
            assert job.state == "done", job.record.error
            device_id = (job.record.handle or "").rsplit("job=", 1)[-1]
            # counts equal what the device sampled, shot for shot
            assert dict(job.counts) == sampled[device_id]
    assert len(tokens) >= 2  # tokens expired and were fetched again
    for secret in [device.token, *tokens]:
        assert keep_holds_any(keep, secret) == []
    assert device.token not in proc.stdout + proc.stderr


def test_a_repeated_submission_is_answered_303_and_joins_the_first_run(tmp_path: Path) -> None:
    with running_device(preset="exchange", queue_delay=0.2, page_size=5) as device:
        env = _env(device)
        keep = rest_keep(tmp_path, device)
        with Keeper.open(keep) as keeper:
            job_id = keeper.submit(PROGRAM.format(angle=0.3), backend="dev", shots=30).id
        # the run is accepted but its answer is lost: the retry meets 303 See Other
        device.force("lost", method="POST", path="/v2/runs")
        _drain(keep, env)
        stats = device.stats()
    assert stats["submits"] == 2 and stats["replays"] == 1 and stats["executions"] == 1
    with Keeper.open(keep) as keeper:
        job = keeper.job(job_id)
        assert job.state == "done" and sum(job.counts.values()) == 30
        # the layout splits the registers: a Bell pair in a (00 or 11), a coin in b
        assert {key.split("|")[0] for key in job.counts} <= {"00", "11"}
        assert Counter(len(key) for key in job.counts) == {4: len(job.counts)}
