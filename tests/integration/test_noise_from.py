"""A noisy stand-in built from a device's calibration: the loopback device's invented
calibration, archived with a finished job, becomes a trajectory backend's noise, and the
snapshot's digest is recorded with every result (jobkeeper.backends.sim.calibration).
Real HTTP on 127.0.0.1 only."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest

from jobkeeper import Keeper
from jobkeeper.exceptions import ConfigError
from jobkeeper.hashing import digest_of
from jobkeeper.loopback.testing import running_device
from tests.integration.helpers import circuit_text


def _toml(value: Any) -> str:
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_toml(v)}" for k, v in value.items()) + " }"
    return json.dumps(value)


def keep_with_standin(tmp_path: Path, device: Any, refresh: bool) -> Path:
    keep = tmp_path / "keep"
    keep.mkdir()
    lines = ["[backends.dev]"]
    lines += [f"{k} = {_toml(v)}" for k, v in device.backend_config().items()]
    lines += ["", "[backends.standin]", 'adapter = "trajectories"', 'noise_from = "dev"']
    if refresh:
        lines.append("noise_refresh = true")
    (keep / "config.toml").write_text("\n".join(lines) + "\n")
    return keep


@pytest.mark.slow
def test_standin_takes_the_latest_archived_snapshot_and_records_its_digest(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    with running_device(seed=4) as device:
        monkeypatch.setenv(device.token_env, device.token)
        keep = keep_with_standin(tmp_path, device, refresh=False)
        with Keeper.open(keep) as keeper:
            with pytest.raises(ConfigError, match="no calibration snapshot of 'dev'"):
                keeper.backend("standin")
            real = keeper.run(circuit_text(0.5), backend="dev", shots=20, seed=1)
            assert real.state == "done"
        with Keeper.open(keep) as keeper:
            snapshot = keeper.store.result(real.id).metadata["calibration"]  # type: ignore[union-attr]
            job = keeper.run(circuit_text(0.5), backend="standin", shots=50, seed=2)
            assert job.state == "done"
            noise = keeper.store.result(job.id).metadata["noise"]  # type: ignore[union-attr]
    source = noise["derived_from"]
    assert source["snapshot_digest"] == digest_of(snapshot)
    assert source["fetched"] == "latest archived snapshot"
    assert noise["t1"][0] == snapshot["data"]["t1_us"][0] / 1e6
    assert noise["depolarizing_2q"] > 0 and noise["gate_time_readout"] > 0


@pytest.mark.slow
def test_noise_refresh_fetches_the_snapshot_live(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    with running_device(seed=5) as device:
        monkeypatch.setenv(device.token_env, device.token)
        keep = keep_with_standin(tmp_path, device, refresh=True)
        with Keeper.open(keep) as keeper:
            info = keeper.backend("standin").info
    assert info.calibration is not None
    assert info.calibration["derived_from"]["fetched"] == "live (noise_refresh)"
    assert info.max_qubits == 20  # the loopback device's calibration lists 20 qubits
