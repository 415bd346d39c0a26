"""What the command line shows besides results: progress on a terminal (and nothing in a
pipe), help texts as written, and start-up that loads only what a command needs."""

from __future__ import annotations

import json
import os
import pty
import re
import subprocess
import sys
from pathlib import Path

import pytest

from jobkeeper.cli import app, main

REPO = Path(__file__).resolve().parents[2]
BELL = str(REPO / "examples" / "circuits" / "bell.qasm")

# Loaded only by commands that compute, sign or read the archive, never by --help.
HEAVY = ("numpy", "scipy", "pydantic", "cryptography", "jobkeeper.backends",
         "jobkeeper.keeper", "jobkeeper.store", "jobkeeper.config", "jobkeeper.circuit")  # fmt: skip


def _loaded_after(args: list[str], cwd: Path) -> set[str]:
    code = (
        "import sys\nfrom jobkeeper.cli import main\n"
        f"code = main({args!r})\n"
        "print('\\n'.join(sorted(sys.modules)), file=sys.stderr)\n"
    )
    proc = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=60, cwd=cwd,
        check=False,
    )  # fmt: skip
    return set(proc.stderr.split())


def test_help_loads_no_numerics_models_or_backends(tmp_path: Path) -> None:
    loaded = _loaded_after(["--help"], tmp_path)
    assert "typer" in loaded  # the probe itself works
    assert not [name for name in HEAVY if name in loaded]


def test_a_command_still_loads_what_it_needs(tmp_path: Path) -> None:
    assert main(["init", "--keep", str(tmp_path / "k")]) == 0
    loaded = _loaded_after(["run", BELL, "--keep", str(tmp_path / "k")], tmp_path)
    assert {"numpy", "jobkeeper.keeper"} <= loaded


def _stderr_on_a_terminal(args: list[str], cwd: Path) -> tuple[int, bytes]:
    master, slave = pty.openpty()
    proc = subprocess.Popen(
        [sys.executable, "-m", "jobkeeper", *args], cwd=cwd, stdout=subprocess.DEVNULL,
        stderr=slave, env={**os.environ, "TERM": "xterm"},
    )  # fmt: skip
    os.close(slave)
    drawn = b""
    while True:
        try:
            chunk = os.read(master, 4096)
        except OSError:  # the other end closed (Linux reports EIO)
            break
        if not chunk:
            break
        drawn += chunk
    os.close(master)
    return proc.wait(timeout=60), drawn


def test_run_draws_progress_on_a_terminal_and_nothing_in_a_pipe(tmp_path: Path) -> None:
    keep = str(tmp_path / "k")
    code, drawn = _stderr_on_a_terminal(["run", BELL, "--keep", keep, "--seed", "1"], tmp_path)
    assert code == 0
    assert b"running bell.qasm" in drawn and b"0:00:0" in drawn  # spinner with elapsed time
    proc = subprocess.run(
        [sys.executable, "-m", "jobkeeper", "run", BELL, "--keep", keep, "--seed", "2"],
        capture_output=True, timeout=60, check=False,
    )  # fmt: skip
    assert proc.returncode == 0 and proc.stderr == b""


def test_wait_on_a_queued_job_says_it_is_queued(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    keep = str(tmp_path / "k")
    assert main(["submit", BELL, "--keep", keep, "--json"]) == 0
    job_id = json.loads(capsys.readouterr().out)[0]["id"]
    assert main(["wait", job_id, "--keep", keep, "--timeout", "0.3"]) == 1
    err = capsys.readouterr().err
    assert "still queued" in err and "running" not in err.replace("is one running", "")
    assert len(err.splitlines()) == 1


def test_counts_json(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    keep = str(tmp_path / "k")
    assert main(["run", BELL, "--keep", keep, "--seed", "4", "--json"]) == 0
    ran = json.loads(capsys.readouterr().out)
    assert main(["counts", ran["id"], "--keep", keep, "--json"]) == 0
    shown = json.loads(capsys.readouterr().out)
    assert shown["counts"] == ran["counts"] and shown["count_keys"] == ran["count_keys"]
    assert main(["counts", ran["id"], "--keep", keep, "--json", "--format", "csv"]) == 2


def _commands() -> list[str]:
    return [c.name or c.callback.__name__ for c in app.registered_commands if c.callback]


@pytest.mark.parametrize("command", _commands())
def test_help_text_has_no_eaten_markup(
    command: str, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    # The help renderer reads "[...]" as markup and drops it: "Shots [default: 1024]."
    # came out as "Shots .". A default written into help text can also drift from the
    # real one, so help says where a default comes from instead.
    monkeypatch.setenv("COLUMNS", "200")
    assert main([command, "--help"]) == 0
    text = capsys.readouterr().out
    assert "Usage" in text
    assert not re.search(r"\w \.(\s|$)", text), text
    assert "[[" not in text


def test_every_read_command_has_json() -> None:
    read = {"init", "backends", "check", "submit", "run", "worker", "jobs", "show", "wait",
            "counts", "cancel", "keys", "verify", "bundle", "rerun", "compare"}  # fmt: skip
    for command in app.registered_commands:
        name = command.name or (command.callback.__name__ if command.callback else "")
        if name in read:
            assert command.callback is not None
            assert "json_out" in command.callback.__code__.co_varnames, name


def test_run_against_an_unreachable_device_exits_3_after_the_retry_budget(
    capsys: pytest.CaptureFixture[str], tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import socket

    keep = tmp_path / "k"
    assert main(["init", "--keep", str(keep)]) == 0
    # A port bound on 127.0.0.1 but not listening: every connection is refused.
    with socket.socket() as closed:
        closed.bind(("127.0.0.1", 0))
        port = closed.getsockname()[1]
        config = (keep / "config.toml").read_text()
        config = config.replace("max_attempts = 10", "max_attempts = 2")
        (keep / "config.toml").write_text(
            config + "\n[retry]\nbase = 0.05\ncap = 0.1\n\n[backends.dev]\nadapter = 'rest'\n"
            f"profile = 'loopback'\nurl = 'http://127.0.0.1:{port}'\ntoken_env = 'JK_TEST_TOKEN'\n"
        )
        monkeypatch.setenv("JK_TEST_TOKEN", "not-a-secret")
        capsys.readouterr()
        code = main(["run", BELL, "--keep", str(keep), "-b", "dev"])
    err = capsys.readouterr().err
    assert code == 3, err
    assert "failed" in err and len(err.splitlines()) == 1
