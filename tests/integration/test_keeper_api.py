"""Keeper as the API: bounds given to it hold, and what it hands back says where a job is."""

from __future__ import annotations

import json
import time
from pathlib import Path

from jobkeeper import Keeper
from jobkeeper.loopback.testing import running_device

BELL = Path(__file__).resolve().parents[2] / "examples" / "circuits" / "bell.qasm"


def test_run_with_a_timeout_leaves_a_slow_remote_job_for_a_worker(
    tmp_path: Path, monkeypatch
) -> None:
    # The device holds each job 5 s in its queue; run gives up waiting after 0.5 s and the
    # job stays on the device (waiting), to be polled by a later worker, not sent again.
    with running_device(queue_delay=5.0) as device:
        monkeypatch.setenv(device.token_env, device.token)
        keep = tmp_path / "keep"
        keep.mkdir()
        lines = ["[poll]", "first = 0.1", "factor = 1.5", "cap = 0.2", "", "[backends.dev]"]
        lines += [f"{k} = {json.dumps(v)}" for k, v in device.backend_config().items()]
        (keep / "config.toml").write_text("\n".join(lines) + "\n")
        with Keeper.open(keep) as keeper:
            started = time.monotonic()
            job = keeper.run(BELL, backend="dev", shots=100, timeout=0.5)
            elapsed = time.monotonic() - started
            assert job.state in ("queued", "waiting") and elapsed < 4.0, (job.state, elapsed)
            done = keeper.work(once=True, timeout=20)
            assert done.done == 1 and job.refresh().state == "done"
            assert device.stats()["duplicates"] == 0
