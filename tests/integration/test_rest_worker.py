"""Remote devices end to end: worker processes drive the REST adapter against the loopback
device over real HTTP on 127.0.0.1, through injected faults and SIGKILLs.

The device deduplicates by Idempotency-Key (IETF httpapi idempotency-key draft) and
counts every execution, so "0 duplicate executions" is measured on the device itself."""

from __future__ import annotations

import base64
import json
import os
import random
import signal
import subprocess
import time
from pathlib import Path
from typing import Any

import pytest
from scipy.stats import chisquare

from jobkeeper import Keeper
from jobkeeper.loopback.testing import running_device
from tests.integration.helpers import circuit_text, jobkeeper_cmd, start_worker

FAST_LEASE = ("--lease", "1.5", "--heartbeat", "0.3", "--lease-check", "0.3")
CLIENT = {
    "timeout": {"connect": 2.0, "read": 0.5, "write": 2.0, "pool": 20.0},
    "max_connections": 32,
    "retry": {"attempts": 3, "first_wait": 0.05, "max_wait": 1.0},
}


def rest_keep(tmp_path: Path, device: Any, *, max_attempts: int = 30) -> Path:
    keep = tmp_path / "keep"
    keep.mkdir()
    table = device.backend_config(**CLIENT)
    lines = [
        "[defaults]", f"max_attempts = {max_attempts}", "",
        "[retry]", "base = 0.05", "cap = 1.0", "",
        "[poll]", "first = 0.1", "factor = 1.5", "cap = 1.0", "",
        "[backends.dev]",
    ]  # fmt: skip
    for key, value in table.items():
        lines.append(f"{key} = {_toml(value)}")
    (keep / "config.toml").write_text("\n".join(lines) + "\n")
    return keep


def _toml(value: Any) -> str:
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_toml(v)}" for k, v in value.items()) + " }"
    return json.dumps(value)


def _env(device: Any) -> dict[str, str]:
    return {**os.environ, device.token_env: device.token}


@pytest.mark.slow
def test_two_hundred_jobs_at_fault_rate_0_3_all_done_once_each(tmp_path: Path, monkeypatch) -> None:
    with running_device(queue_delay=0.2, fault_rate=0.3, seed=11) as device:
        monkeypatch.setenv(device.token_env, device.token)
        keep = rest_keep(tmp_path, device)
        with Keeper.open(keep) as keeper:
            keeper.submit_many([circuit_text(0.01 * i) for i in range(200)], backend="dev",
                               shots=100, seed=3)  # fmt: skip
        proc = subprocess.run(
            jobkeeper_cmd("worker", "--once", "--keep", str(keep), "--in-flight", "64", "--json"),
            capture_output=True, text=True, timeout=300, env=_env(device), check=False,
        )  # fmt: skip
        assert proc.returncode == 0, proc.stderr
        stats = device.stats()
    assert stats["duplicates"] == 0
    assert stats["executions"] == 200
    assert sum(stats["faults"].values()) > 50  # the faults really happened
    with Keeper.open(keep) as keeper:
        jobs = keeper.jobs()
        failed = [
            (j.record.error, [a.message for a in j.attempts]) for j in jobs if j.state != "done"
        ]
        assert not failed, failed[:3]
        total: dict[str, int] = {}
        for job in jobs:
            for outcome, n in job.counts.items():
                total[outcome] = total.get(outcome, 0) + n
    # Each circuit prepares a Bell pair (rz on |0> only adds a phase): outcomes 00 and 11
    # with probability 1/2 each (Nielsen & Chuang §1.3.6). Goodness of fit at α = 0.001.
    assert set(total) == {"00", "11"}
    assert chisquare([total["00"], total["11"]]).pvalue > 0.001
    assert device.token not in proc.stdout + proc.stderr


@pytest.mark.slow
def test_sigkill_five_times_with_a_hundred_remote_jobs_in_flight(
    tmp_path: Path, monkeypatch
) -> None:
    with running_device(queue_delay=3.0, seed=5) as device:
        monkeypatch.setenv(device.token_env, device.token)
        keep = rest_keep(tmp_path, device)
        with Keeper.open(keep) as keeper:
            ids = [s.job.id for s in keeper.submit_many(
                [circuit_text(0.02 * i) for i in range(100)], backend="dev", shots=50)]  # fmt: skip
        rng = random.Random(7)
        log = tmp_path / "worker.log"
        os.environ[device.token_env] = device.token
        for _ in range(5):
            worker = start_worker(keep, "--in-flight", "200", *FAST_LEASE, stderr_path=log)
            time.sleep(rng.uniform(0.8, 2.5))
            worker.send_signal(signal.SIGKILL)
            worker.communicate(timeout=30)
        final = subprocess.run(
            jobkeeper_cmd("worker", "--once", "--keep", str(keep), "--in-flight", "200", *FAST_LEASE),
            capture_output=True, text=True, timeout=300, env=_env(device), check=False,
        )  # fmt: skip
        assert final.returncode == 0, final.stderr
        stats = device.stats()
    with Keeper.open(keep) as keeper:
        records = keeper.store.get_many(ids)
        failed = [(r.error, [a.message for a in keeper.store.attempts(r.id)]) for r in records
                  if r.state != "done"]  # fmt: skip
        assert not failed, failed[:3]
        assert len(keeper.store.log_entries()) == 100
    assert stats["executions"] == 100 and stats["duplicates"] == 0
    assert device.token not in log.read_text()


def test_a_400_fails_at_once_and_a_401_names_the_variable_not_the_token(
    tmp_path: Path, monkeypatch
) -> None:
    # The device takes 5 qubits while its profile says 20: the device itself answers 400.
    with running_device(queue_delay=0.05, max_qubits=5) as device:
        monkeypatch.setenv(device.token_env, device.token)
        keep = rest_keep(tmp_path, device)
        wide = 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[6];\ncreg c[6];\nh q[0];\nmeasure q -> c;\n'
        with Keeper.open(keep) as keeper:
            job = keeper.run(wide, backend="dev", shots=10)
            assert job.state == "failed" and len(job.attempts) == 1
            assert "(400)" in (job.record.error or "") and "qubits" in (job.record.error or "")
        monkeypatch.setenv(device.token_env, "wrong-token-value")
        with Keeper.open(keep) as keeper:
            job = keeper.run(circuit_text(1.0), backend="dev", shots=10)
            assert job.state == "failed"
            message = job.record.error or ""
            assert device.token_env in message and "wrong-token-value" not in message
            assert device.token not in message


@pytest.mark.slow
def test_a_thousand_jobs_in_flight_on_one_worker_stay_bounded(tmp_path: Path) -> None:
    import psutil

    pool = 16
    # A queue delay long enough that all 1,000 are accepted before the first is done.
    with running_device(queue_delay=10.0, seed=9) as device:
        keep = tmp_path / "keep"
        keep.mkdir()
        (keep / "config.toml").write_text(
            "[poll]\nfirst = 2.0\nfactor = 1.5\ncap = 4.0\n\n[backends.dev]\n"
            f'adapter = "rest"\nprofile = "loopback"\nurl = "{device.url}"\n'
            f'token_env = "{device.token_env}"\nmax_connections = {pool}\n'
        )
        with Keeper.open(keep) as keeper:
            keeper.submit_many([circuit_text(0.0001 * i) for i in range(1000)], backend="dev",
                               shots=10)  # fmt: skip
        worker = subprocess.Popen(
            jobkeeper_cmd("worker", "--once", "--keep", str(keep), "--in-flight", "256"),
            env=_env(device), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
        )  # fmt: skip
        proc = psutil.Process(worker.pid)
        peak_conns, peak_rss, peak_waiting = 0, 0, 0
        deadline = time.monotonic() + 240
        while worker.poll() is None and time.monotonic() < deadline:
            try:
                peak_conns = max(peak_conns, len(proc.net_connections(kind="tcp")))
                peak_rss = max(peak_rss, proc.memory_info().rss)
            except psutil.Error:
                break
            stats = device.stats()
            peak_waiting = max(peak_waiting, stats["jobs"] - stats["states"].get("done", 0))
            time.sleep(0.5)
        out, err = worker.communicate(timeout=60)
        assert worker.returncode == 0, err.decode()
        stats = device.stats()
    assert peak_waiting >= 900  # they really were in flight together
    assert peak_conns <= pool + 2  # the keep-alive pool bounds connections
    assert peak_rss < 400 * 2**20
    assert stats["executions"] == 1000 and stats["duplicates"] == 0
    assert device.token.encode() not in (out + err)


def test_the_token_appears_nowhere_in_the_keep_the_bundle_or_the_output(
    tmp_path: Path, monkeypatch, capsys
) -> None:
    from jobkeeper.cli import main

    token = "tok-" + "7e3a9c1f" * 4  # distinctive, so a stray copy cannot hide
    with running_device(token=token, queue_delay=0.05, fault_rate=0.2, seed=2) as device:
        monkeypatch.setenv(device.token_env, token)
        keep = rest_keep(tmp_path, device)
        assert main(["submit", *[str(p) for p in _circuit_files(tmp_path, 6)], "-b", "dev",
                     "--keep", str(keep)]) == 0  # fmt: skip
        assert main(["worker", "--once", "--keep", str(keep), "--json"]) == 0
        assert main(["jobs", "--keep", str(keep)]) == 0
        bundle = tmp_path / "audit.json"
        ids = [j.id for j in Keeper.open(keep).jobs()]
        assert main(["bundle", *ids, "--keep", str(keep), "-o", str(bundle)]) == 0
        assert main(["show", ids[0], "--keep", str(keep), "--json"]) == 0
        assert main(["verify", "--all", "--keep", str(keep)]) == 0
    out, err = capsys.readouterr()
    needles = [token.encode(), base64.b64encode(token.encode())]
    files = [p for p in tmp_path.rglob("*") if p.is_file()]
    assert any(p.name == "archive.db" for p in files)
    for path in files:
        data = path.read_bytes()
        for needle in needles:
            assert needle not in data, f"the token leaked into {path}"
    for needle in needles:
        assert needle.decode() not in out + err


def _circuit_files(folder: Path, n: int) -> list[Path]:
    paths = []
    for i in range(n):
        path = folder / f"c{i}.qasm"
        path.write_text(circuit_text(0.3 * i))
        paths.append(path)
    return paths


def test_cancel_of_a_waiting_job_reaches_the_device(tmp_path: Path, monkeypatch) -> None:
    with running_device(queue_delay=60.0, seed=3) as device:
        monkeypatch.setenv(device.token_env, device.token)
        keep = rest_keep(tmp_path, device)
        with Keeper.open(keep) as keeper:
            job = keeper.submit(circuit_text(0.5), backend="dev", shots=10)
        log = tmp_path / "w.log"
        os.environ[device.token_env] = device.token
        worker = start_worker(keep, stderr_path=log)
        try:
            with Keeper.open(keep) as keeper:
                assert _wait_state(keeper, job.id, "waiting")
                keeper.cancel(job.id)
                assert _wait_state(keeper, job.id, "cancelled")
        finally:
            worker.send_signal(signal.SIGTERM)
            worker.communicate(timeout=60)
        stats = device.stats()
    assert stats["cancels"] == 1 and stats["executions"] == 0


def _wait_state(keeper: Keeper, job_id: str, state: str, timeout: float = 60.0) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if keeper.store.get(job_id).state == state:
            return True
        time.sleep(0.1)
    return False
