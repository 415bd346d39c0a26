"""What the worker-level tests of the loopback device's presets share: a keep pointed at
the device, jobs submitted, one worker process draining them with faults on, and the
checks every preset must pass (every job done, counts equal to what the device sampled,
no execution twice, no secret in the keep)."""

from __future__ import annotations

import os
import subprocess
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from jobkeeper import Keeper
from jobkeeper.loopback.testing import CLIENT_ID, CLIENT_ID_ENV, RunningDevice, running_device
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


def device_env(device: RunningDevice) -> dict[str, str]:
    """The environment a worker needs for this device: its secret, and the client id of
    the presets with OAuth."""
    return {**os.environ, device.token_env: device.token, CLIENT_ID_ENV: CLIENT_ID}


def drain(keep: Path, env: dict[str, str]) -> subprocess.CompletedProcess[str]:
    """One worker process that runs until the queue is empty (bounded: 240 s)."""
    return subprocess.run(
        jobkeeper_cmd("worker", "--once", "--keep", str(keep), "--in-flight", "16"),
        capture_output=True, text=True, env=env, cwd=REPO, timeout=240, check=False,
    )  # fmt: skip


def device_job_id(handle: str | None) -> str:
    """The device's job id in a stored format 2 handle (the last segment of a path)."""
    return (handle or "").rsplit("job=", 1)[-1].rsplit("/", 1)[-1]


@dataclass
class Drained:
    """What one run of the worker against a device left behind."""

    keep: Path
    ids: list[str]
    proc: subprocess.CompletedProcess[str]
    stats: dict[str, Any]
    #: the device's job id → the counts it sampled
    sampled: dict[str, dict[str, int]]
    #: the device's job id → what its preset recorded about it
    extra: dict[str, dict[str, Any]]
    secrets: list[str]


def drain_with_faults(
    tmp_path: Path,
    *,
    jobs: int = 8,
    shots: int = 40,
    backend: dict[str, Any] | None = None,
    forced: tuple[tuple[str, str, str, int], ...] = (),
    **settings: Any,
) -> Drained:
    """``jobs`` jobs of PROGRAM (distinct angles and seeds) run by one worker process
    against a loopback device with ``settings``; ``backend`` overrides keys of the
    backend's table (a profile file, say); ``forced`` faults (kind, method, path, times)
    come first, whatever the random draws give."""
    with running_device(**settings) as device:
        for kind, method, path, times in forced:
            device.force(kind, method=method, path=path, times=times)
        keep = rest_keep(tmp_path, _Overridden(device, backend or {}))
        with Keeper.open(keep) as keeper:
            ids = [keeper.submit(PROGRAM.format(angle=0.1 * i), backend="dev", shots=shots,
                                 seed=i).id for i in range(jobs)]  # fmt: skip
        proc = drain(keep, device_env(device))
        jobs_there = device.device.jobs()
        return Drained(
            keep=keep, ids=ids, proc=proc, stats=device.stats(),
            sampled={job.id: dict(job.outcome[1]) for job in jobs_there if job.outcome},
            extra={job.id: dict(job.extra) for job in jobs_there},
            secrets=[device.token, *device.app.issuer.issued],
        )  # fmt: skip


class _Overridden:
    """A running device whose backend table has some keys replaced."""

    def __init__(self, device: RunningDevice, overrides: dict[str, Any]) -> None:
        self._device = device
        self._overrides = overrides

    def backend_config(self, **more: Any) -> dict[str, Any]:
        return self._device.backend_config(**{**more, **self._overrides})


def assert_every_job_done_once(
    run: Drained, *, executions: int = 8, circuit_of: Callable[[Any], None] | None = None
) -> None:
    """The acceptance of every preset: the worker ended well, faults did happen, every
    job is done with the counts the device sampled, nothing ran twice, and no secret
    (client secret, static key or any access token) is in any byte of the keep."""
    assert run.proc.returncode == 0, run.proc.stderr
    assert sum(run.stats["faults"].values()) > 0  # the faults happened
    assert run.stats["executions"] == executions and run.stats["duplicates"] == 0
    assert run.stats["payload_duplicates"] == 0
    with Keeper.open(run.keep) as keeper:
        for job_id in run.ids:
            job = keeper.job(job_id)
            assert job.state == "done", job.record.error
            # counts equal what the device sampled, shot for shot
            assert dict(job.counts) == run.sampled[device_job_id(job.record.handle)]
            if circuit_of is not None:
                circuit_of(job)
    for secret in run.secrets:
        assert keep_holds_any(run.keep, secret) == []
    assert run.secrets[0] not in run.proc.stdout + run.proc.stderr


def repeat_after_lost_answer(
    tmp_path: Path, submit_path: str, *, shots: int = 10, **settings: Any
) -> tuple[dict[str, Any], str, dict[str, int]]:
    """One job whose first submission is carried out but its answer lost, so that the
    retry meets the device's answer to a repeated key: (device stats, the job's state,
    its counts)."""
    with running_device(**settings) as device:
        keep = rest_keep(tmp_path, device)
        with Keeper.open(keep) as keeper:
            job_id = keeper.submit(PROGRAM.format(angle=0.7), backend="dev", shots=shots).id
        device.force("lost", method="POST", path=submit_path)
        drain(keep, device_env(device))
        stats = device.stats()
    with Keeper.open(keep) as keeper:
        job = keeper.job(job_id)
        return stats, str(job.state), dict(job.counts or {})
