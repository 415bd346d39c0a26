"""Helpers for tests that run jobkeeper as real processes."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parents[2]


def circuit_text(angle: float, qubits: int = 2) -> str:
    """A distinct small circuit per angle (an invented family for load tests)."""
    return (
        'OPENQASM 2.0;\ninclude "qelib1.inc";\n'
        f"qreg q[{qubits}];\ncreg c[{qubits}];\n"
        f"rz({angle!r}) q[0];\nh q[0];\ncx q[0],q[1];\nmeasure q -> c;\n"
    )


def write_recording_keep(
    keep: Path, ledger: Path, *, delay: float = 0.0, store: str | None = None
) -> None:
    keep.mkdir(parents=True, exist_ok=True)
    lines = []
    if store:
        lines.append(f'store = "{store}"')
    lines += [
        "[backends.rec]",
        'adapter = "recording"',
        f'ledger_dir = "{ledger}"',
        f"delay = {delay}",
    ]
    (keep / "config.toml").write_text("\n".join(lines) + "\n")


def jobkeeper_cmd(*args: str) -> list[str]:
    return [sys.executable, "-m", "jobkeeper", *args]


def start_worker(
    keep: Path, *args: str, stderr_path: Path | None = None
) -> subprocess.Popen[bytes]:
    if stderr_path is None:
        return subprocess.Popen(
            jobkeeper_cmd("worker", "--keep", str(keep), *args),
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=REPO, env={**os.environ},
        )  # fmt: skip
    with open(stderr_path, "ab") as err:
        return subprocess.Popen(
            jobkeeper_cmd("worker", "--keep", str(keep), *args),
            stdout=subprocess.PIPE, stderr=err, cwd=REPO, env={**os.environ},
        )  # fmt: skip


def sigkill(worker: subprocess.Popen[bytes]) -> bool:
    """SIGKILL a worker that is still running and reap it; False if it had ended."""
    if worker.poll() is not None:
        return False
    worker.send_signal(signal.SIGKILL)
    worker.wait(timeout=30)
    if worker.stdout is not None:
        worker.stdout.close()
    return True


def wait_for(predicate, timeout: float, interval: float = 0.05) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(interval)
    return bool(predicate())


def jk(capsys: Any, *args: str) -> tuple[int, str, str]:
    """The command line in this process (``jobkeeper.cli.main``): exit code, stdout and
    stderr of ``args`` alone (``capsys``: pytest's capture fixture)."""
    from jobkeeper.cli import main

    capsys.readouterr()
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err
