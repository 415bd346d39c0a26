"""`jobkeeper probe`: a backend checked against its device without submitting work."""

from __future__ import annotations

import json
import os
import subprocess
from pathlib import Path

from jobkeeper.loopback.testing import CLIENT_ID, CLIENT_ID_ENV, running_device
from tests.integration.helpers import REPO, jobkeeper_cmd
from tests.integration.test_rest_worker import rest_keep


def _probe(keep: Path, env: dict[str, str], backend: str = "dev") -> tuple[int, dict]:
    proc = subprocess.run(
        jobkeeper_cmd("probe", backend, "--keep", str(keep), "--json"),
        capture_output=True, text=True, env=env, cwd=REPO, timeout=60, check=False,
    )  # fmt: skip
    assert "Traceback" not in proc.stderr
    return proc.returncode, json.loads(proc.stdout)


def _outcomes(report: dict) -> dict[str, str]:
    return {check["name"]: check["outcome"] for check in report["checks"]}


def test_probe_exchange_device_token_request_and_calibration(tmp_path: Path) -> None:
    with running_device(preset="exchange") as device:
        env = {**os.environ, device.token_env: device.token, CLIENT_ID_ENV: CLIENT_ID}
        keep = rest_keep(tmp_path, device)
        code, report = _probe(keep, env)
        stats = device.stats()
        issued = len(device.app.issuer.issued)
        wrong = {**env, device.token_env: "not-the-secret"}
        refused, refused_report = _probe(keep, wrong)
    assert code == 0 and report["ok"]
    assert _outcomes(report) == {"reachable": "ok", "authentication": "ok", "calibration": "ok"}
    assert issued == 1 and stats["submits"] == 0  # a token was fetched; nothing submitted
    assert report["declared"]["authentication"] == "OAuth 2.0 client credentials"
    assert report["declared"]["pages"] == "RFC 8288 Link rel=next"
    assert refused == 1 and _outcomes(refused_report)["authentication"] == "failed"
    assert "not-the-secret" not in json.dumps(refused_report)


def test_probe_reports_an_unreachable_device_with_exit_3(tmp_path: Path) -> None:
    with running_device() as device:
        env = {**os.environ, device.token_env: device.token}
        keep = rest_keep(tmp_path, device)
    code, report = _probe(keep, env)  # the device has stopped
    assert code == 3
    assert _outcomes(report) == {
        "reachable": "failed", "authentication": "skipped", "calibration": "skipped",
    }  # fmt: skip


def test_probe_of_a_simulator_has_nothing_to_reach(tmp_path: Path) -> None:
    with running_device() as device:
        keep = rest_keep(tmp_path, device)
    code, report = _probe(keep, dict(os.environ), backend="statevector")
    assert code == 0 and _outcomes(report) == {"reachable": "skipped"}
