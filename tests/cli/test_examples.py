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
    # The rehearsal step: a noisy stand-in built from the device's archived calibration,
    # judged against the ideal distribution (issue: noisy rehearsal).
    assert "noise from snapshot sha256:" in proc.stdout
    assert "compare --ideal:" in proc.stdout


def test_the_example_device_profile_loads() -> None:
    from jobkeeper.backends.rest.adapter import from_config

    backend = from_config(
        "shelf",
        {"adapter": "rest", "profile": str(REPO / "examples" / "devices" / "tidewater-ion-shelf.toml"),
         "url": "https://shelf.example.invalid/api", "token_env": "SHELF_TOKEN"},
    )  # fmt: skip
    assert backend.info.kind == "remote" and backend.info.max_qubits == 12


def test_examples_use_only_the_public_api() -> None:
    # The examples are what users copy: they import from `jobkeeper` itself (its __all__),
    # never from a module inside it.
    import ast

    import jobkeeper

    for path in (REPO / "examples").rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("jobkeeper"):
                assert node.module == "jobkeeper", f"{path.name} imports {node.module}"
                assert {alias.name for alias in node.names} <= set(jobkeeper.__all__)
            if isinstance(node, ast.Import):
                assert not any(a.name.startswith("jobkeeper.") for a in node.names), path.name
