"""The architecture is a contract: the import-linter contracts in pyproject.toml hold, and
each kind of violation they exist for is caught when planted in a copy of the package.

Rules from DESIGN §2 and DEVELOPERS.md ("Rules that hold everywhere"); the checker is
import-linter (a reference tool from PyPI), run as a user runs it."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tomllib
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
LINT_IMPORTS = Path(sys.executable).with_name("lint-imports")


def lint_imports(root: Path) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "PYTHONPATH": str(root)}
    return subprocess.run(
        [str(LINT_IMPORTS), "--no-cache", "--config", str(root / "pyproject.toml")],
        cwd=root,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )


def test_the_contracts_hold() -> None:
    run = lint_imports(REPO)
    assert run.returncode == 0, run.stdout + run.stderr
    assert "0 broken" in run.stdout


@pytest.fixture(scope="module")
def copy(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("architecture")
    shutil.copy(REPO / "pyproject.toml", root / "pyproject.toml")
    shutil.copytree(
        REPO / "jobkeeper", root / "jobkeeper", ignore=shutil.ignore_patterns("__pycache__")
    )
    return root


def _contract(start: str) -> str:
    config = tomllib.loads((REPO / "pyproject.toml").read_text())
    names = [c["name"] for c in config["tool"]["importlinter"]["contracts"]]
    (name,) = [n for n in names if n.startswith(start)]
    return name


def _private_module() -> str:
    """A private module inside a subpackage of jobkeeper (whichever there is first: files
    move as the layout changes)."""
    found = sorted(
        path.relative_to(REPO).with_suffix("")
        for path in (REPO / "jobkeeper").glob("*/_*.py")
        if not path.name.startswith("__")
    )
    return ".".join(found[0].parts)


CONTRACTS = {
    "protected": _contract("The core never imports a specific adapter"),
    "cycle": _contract("No cycles between the packages"),
    "private": _contract("A private module is imported only from inside its own package"),
    "independent": _contract("The simulators and the REST adapter are independent"),
}

PLANTS = [
    # the core importing an adapter instead of asking the registry
    ("queue.py", "from jobkeeper.backends.sim.statevector import StatevectorBackend", "protected"),
    # a cycle between two packages of jobkeeper
    ("circuit/ir.py", "import jobkeeper.preflight", "cycle"),  # preflight imports circuit
    # another package's private module
    ("keeper/runs.py", f"import {_private_module()}", "private"),
    # one adapter importing another
    ("backends/rest/results.py", "import jobkeeper.backends.sim.sampling", "independent"),
]


@pytest.mark.parametrize(("module", "line", "kind"), PLANTS)
def test_a_planted_violation_breaks_a_contract(
    copy: Path, module: str, line: str, kind: str
) -> None:
    path = copy / "jobkeeper" / module
    original = path.read_text()
    path.write_text(original + f"\n{line}  # planted\n")
    try:
        run = lint_imports(copy)
    finally:
        path.write_text(original)
    assert run.returncode == 1, run.stdout + run.stderr
    # The summary names each contract followed by KEPT or BROKEN (wrapped at 80 columns).
    summary = " ".join(run.stdout.split())
    assert f"{CONTRACTS[kind]} BROKEN" in summary, run.stdout
