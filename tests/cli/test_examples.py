"""Every example runs (the demo is what `make demo` shows a new user)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]


def test_the_demo_runs_and_verifies() -> None:
    proc = subprocess.run(
        [sys.executable, str(REPO / "examples" / "demo.py")],
        capture_output=True, text=True, timeout=300, check=False,
    )  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    assert "deduplicated=True" in proc.stdout
    assert "all signatures, digests and log proofs hold" in proc.stdout


def test_the_example_device_profile_loads() -> None:
    from jobkeeper.backends.rest.adapter import from_config

    backend = from_config(
        "shelf",
        {"adapter": "rest", "profile": str(REPO / "examples" / "devices" / "tidewater-ion-shelf.toml"),
         "url": "https://shelf.example.invalid/api", "token_env": "SHELF_TOKEN"},
    )  # fmt: skip
    assert backend.info.kind == "remote" and backend.info.max_qubits == 12
