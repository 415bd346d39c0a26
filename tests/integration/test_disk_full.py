"""A real full disk: the keep on a 2 MiB tmpfs, filled up by another file. The worker and
submit stop with exit 3 and one line (never a traceback), no job is marked failed, and
once space is freed a worker finishes every job and the log verifies."""

from __future__ import annotations

import json
import os
import subprocess
from pathlib import Path

from jobkeeper import Keeper
from tests.integration.helpers import REPO, circuit_text, jobkeeper_cmd
from tests.integration.mounts import small_tmpfs

JOBS = 100
FAST_LEASE = ("--lease", "1", "--heartbeat", "0.2", "--lease-check", "0.2")


def _fill(path: Path, leave: int) -> None:
    """Write ``path`` until the disk has about ``leave`` bytes free (0: until it is full)."""
    chunk = b"\0" * 4096
    with open(path, "ab") as out:
        for _ in range(4096):  # bounded: 16 MiB at most, far more than the disk holds
            stat = os.statvfs(path.parent)
            if stat.f_bavail * stat.f_frsize <= leave:
                break
            try:
                out.write(chunk)
                out.flush()
            except OSError:
                break


def _cli(*args: str, timeout: float = 120) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        jobkeeper_cmd(*args), capture_output=True, text=True, timeout=timeout, cwd=REPO,
        check=False,
    )  # fmt: skip


def _states(keep: Path) -> list[str]:
    done = _cli("jobs", "--json", "--keep", str(keep))
    assert done.returncode == 0, done.stderr
    return sorted(job["state"] for job in json.loads(done.stdout))


def _one_line_fault(done: subprocess.CompletedProcess[str]) -> None:
    assert done.returncode == 3, (done.stdout, done.stderr)
    assert "Traceback" not in done.stderr
    lines = [line for line in done.stderr.splitlines() if not line.startswith("worker ")]
    assert len(lines) == 1 and "the disk is full" in lines[0], done.stderr


def test_a_full_disk_stops_the_worker_and_submit_and_fails_no_job(tmp_path: Path) -> None:
    with small_tmpfs(tmp_path / "disk", "2m") as disk:
        keep = disk / "keep"
        with Keeper.open(keep) as keeper:
            keeper.submit_many([circuit_text(0.01 * i) for i in range(JOBS)], shots=32)
        filler = disk / "filler"
        _fill(filler, 64 * 1024)
        worker = _cli("worker", "--once", "--keep", str(keep), *FAST_LEASE)
        _one_line_fault(worker)
        states = _states(keep)
        assert "failed" not in states and states.count("done") < JOBS
        _fill(disk / "filler2", 0)
        new = tmp_path / "new"
        new.mkdir()
        for i in range(50):
            (new / f"n{i}.qasm").write_text(circuit_text(1.0 + 0.01 * i, qubits=3))
        submit = _cli("submit", *map(str, sorted(new.iterdir())), "--keep", str(keep))
        _one_line_fault(submit)
        assert len(_states(keep)) == JOBS  # the submission left nothing behind
        filler.unlink()
        (disk / "filler2").unlink()
        final = _cli("worker", "--once", "--keep", str(keep), *FAST_LEASE, timeout=240)
        assert final.returncode == 0, final.stderr
        assert _states(keep) == ["done"] * JOBS
        verify = _cli("verify", "--all", "--keep", str(keep))
        assert verify.returncode == 0, verify.stdout + verify.stderr
