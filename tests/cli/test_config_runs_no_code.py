"""Reading a keep's config.toml never runs code the user did not install: an adapter is a
built-in name or an entry point of the group ``jobkeeper.backends``, never a
``module:factory`` path (a keep's config may come from a shared repository).

Each case runs the installed command in a fresh interpreter whose import path holds a
module that would leave a file behind the moment it is imported; the file must not appear."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from jobkeeper.cli import main

REPO = Path(__file__).resolve().parents[2]
BELL = str(REPO / "examples" / "circuits" / "bell.qasm")

# A backend name that is Python code: the attack on an adapter "builtins:exec", which
# would have been called as exec(name, config).
CODE_NAME = "__import__('pathlib').Path('{marker}').write_text('ran')"


def _tables(marker: Path) -> list[tuple[str, str]]:
    """(backend name, adapter) pairs that would run code if adapters were import paths."""
    return [
        (CODE_NAME.format(marker=marker), "builtins:exec"),
        ("x", "builtins:eval"),
        ("x", "plant:factory"),  # the module below: importing it writes the marker
        ("x", "plant"),
        ("x", "os:system"),
        ("x", "jobkeeper.testing:recording_backend"),
    ]


# Every adapter string with the command that reads the whole config; the code-named
# backend also with the commands that resolve the default backend.
RUNS = (
    [(["backends"], case) for case in range(6)]
    + [(command, 0) for command in (["check", BELL], ["run", BELL], ["submit", BELL])]
    + [(["run", BELL], 2)]
)


@pytest.mark.parametrize(("command", "case"), RUNS)
def test_no_adapter_string_in_the_config_runs_code(
    tmp_path: Path, command: list[str], case: int
) -> None:
    marker = tmp_path / "code-ran"
    plant = tmp_path / "path"
    plant.mkdir()
    (plant / "plant.py").write_text(
        f"import pathlib\npathlib.Path({str(marker)!r}).write_text('imported')\n"
        f"def factory(name, config):\n    pathlib.Path({str(marker)!r}).write_text('called')\n"
    )
    name, adapter = _tables(marker)[case]
    keep = tmp_path / "keep"
    assert main(["init", "--keep", str(keep)]) == 0
    quoted = name.replace("\\", "\\\\").replace('"', '\\"')
    (keep / "config.toml").write_text(
        f'[defaults]\nbackend = "{quoted}"\n\n[backends."{quoted}"]\nadapter = "{adapter}"\n'
    )
    env = {**os.environ, "PYTHONPATH": str(plant)}
    proc = subprocess.run(
        [sys.executable, "-m", "jobkeeper", *command, "--keep", str(keep)],
        capture_output=True, text=True, timeout=60, check=False, cwd=tmp_path, env=env,
    )  # fmt: skip
    assert proc.returncode == 2, proc.stderr
    assert len(proc.stderr.splitlines()) == 1 and "Traceback" not in proc.stderr
    assert "unknown backend adapter" in proc.stderr
    assert not marker.exists(), "code named in config.toml ran"
    assert "queued" not in proc.stdout


def test_a_refused_adapter_queues_nothing(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    keep = tmp_path / "keep"
    assert main(["init", "--keep", str(keep)]) == 0
    (keep / "config.toml").write_text('[backends.x]\nadapter = "builtins:exec"\n')
    assert main(["submit", BELL, "-b", "x", "--keep", str(keep)]) == 2
    capsys.readouterr()
    assert main(["jobs", "--json", "--keep", str(keep)]) == 0
    assert capsys.readouterr().out.strip() == "[]"
