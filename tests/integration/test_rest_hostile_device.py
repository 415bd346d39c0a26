"""A hostile device: answers far larger than any honest one, and secrets echoed back in
disguise. Real worker processes against the loopback device over HTTP on 127.0.0.1."""

from __future__ import annotations

import base64
import binascii
import os
import subprocess
from pathlib import Path
from urllib.parse import quote, quote_plus

from jobkeeper import Keeper
from jobkeeper.loopback.testing import running_device
from tests.integration.helpers import REPO, circuit_text, jobkeeper_cmd
from tests.integration.test_rest_worker import rest_keep

HUGE = 200 * 1024 * 1024


def _worker_peak_rss(keep: Path, env: dict[str, str]) -> tuple[int, str]:
    """(peak resident memory in bytes, stderr) of one `worker --once` process, read with
    wait4 for that process alone (ru_maxrss is in KiB on Linux)."""
    proc = subprocess.Popen(
        jobkeeper_cmd("worker", "--once", "--keep", str(keep)),
        stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, cwd=REPO, env=env,
    )  # fmt: skip
    assert proc.stderr is not None
    with proc.stderr:
        stderr = proc.stderr.read().decode()
    _pid, _status, usage = os.wait4(proc.pid, 0)
    proc.returncode = 0  # reaped above; keep Popen from waiting again
    return usage.ru_maxrss * 1024, stderr


def test_a_200_mib_answer_is_cut_off_within_bounded_memory(tmp_path: Path) -> None:
    with running_device(queue_delay=0.05, huge_size=HUGE) as device:
        env = {**os.environ, device.token_env: device.token}
        # baseline: the same worker run on an honest answer
        (tmp_path / "honest").mkdir()
        (tmp_path / "hostile").mkdir()
        honest = rest_keep(tmp_path / "honest", device)
        with Keeper.open(honest) as keeper:
            keeper.submit(circuit_text(0.1), backend="dev", shots=100, seed=1)
        baseline, _ = _worker_peak_rss(honest, env)
        hostile = rest_keep(tmp_path / "hostile", device)
        with Keeper.open(hostile) as keeper:
            job_id = keeper.submit(circuit_text(0.2), backend="dev", shots=100, seed=1).id
        device.force("huge", method="POST", path="/v1/jobs")
        peak, stderr = _worker_peak_rss(hostile, env)
        stats = device.stats()
    growth = peak - baseline
    print(f"worker peak RSS: honest {baseline / 2**20:.1f} MiB, against a 200 MiB answer "
          f"{peak / 2**20:.1f} MiB (growth {growth / 2**20:.1f} MiB)")  # fmt: skip
    assert stats["faults"] == {"huge": 1}
    assert growth < 100 * 2**20  # issue 12 item 7: under 100 MB above the baseline
    assert "Traceback" not in stderr
    with Keeper.open(hostile) as keeper:
        job = keeper.job(job_id)
        assert job.state == "failed" and job.record.handle is None
        assert "larger than 4194304 bytes" in (job.record.error or "")
    archive = sum(f.stat().st_size for f in hostile.rglob("*") if f.is_file())
    assert archive < 5 * 2**20


def _encodings(secret: str) -> list[bytes]:
    raw = secret.encode()
    forms = {
        secret, secret.lower(), secret.upper(), quote(secret, safe=""), quote_plus(secret),
        base64.b64encode(raw).decode(), base64.urlsafe_b64encode(raw).decode().rstrip("="),
        binascii.hexlify(raw).decode(),
    }  # fmt: skip
    return [form.encode() for form in forms]


def keep_holds_any(keep: Path, secret: str) -> list[str]:
    """Files of the keep (every byte, databases and WAL included) holding the secret in
    any of its encodings."""
    found = []
    forms = _encodings(secret)
    for path in keep.rglob("*"):
        if path.is_file():
            data = path.read_bytes()
            found += [f"{path.name}: {form!r}" for form in forms if form in data]
    return found


def test_a_token_echoed_back_in_disguise_is_never_stored(tmp_path: Path) -> None:
    token = "Echo-Me-Token-7f3a9c"  # mixed case, so lowercasing changes it
    with running_device(queue_delay=0.05, token=token) as device:
        env = {**os.environ, device.token_env: device.token}
        keep = rest_keep(tmp_path, device)
        echoes = ["lower", "upper", "base64", "url", "hex"]
        with Keeper.open(keep) as keeper:
            ids = [keeper.submit(circuit_text(0.1 * i), backend="dev", shots=10).id
                   for i in range(len(echoes))]  # fmt: skip
        for echo in echoes:
            device.app.echo_on_rejection(echo)
        subprocess.run(
            jobkeeper_cmd("worker", "--once", "--keep", str(keep)),
            capture_output=True, env=env, cwd=REPO, timeout=120, check=False,
        )  # fmt: skip
        with Keeper.open(keep) as keeper:
            errors = [keeper.job(job_id).record.error or "" for job_id in ids]
    assert all("[redacted]" in error for error in errors), errors
    assert keep_holds_any(keep, token) == []
