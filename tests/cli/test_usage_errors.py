"""Every usage and configuration error ends the same way: exit 2 (DESIGN §4), exactly one
line on stderr, nothing on stdout and no traceback, whichever copy of click the installed
typer uses (see jobkeeper/cli/_entry.py)."""

from __future__ import annotations

import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

import pytest

from jobkeeper.cli import main
from jobkeeper.cli._entry import usage_error_bases

REPO = Path(__file__).resolve().parents[2]
BELL = str(REPO / "examples" / "circuits" / "bell.qasm")

Setup = Callable[[Path], list[str]]


def _keep(tmp: Path) -> str:
    keep = tmp / "keep"
    if not keep.exists():
        assert main(["init", "--keep", str(keep)]) == 0
    return str(keep)


def _config(text: bytes) -> Setup:
    """A keep whose config.toml holds ``text``."""

    def setup(tmp: Path) -> list[str]:
        keep = _keep(tmp)
        (Path(keep) / "config.toml").write_bytes(text)
        return ["--keep", keep]

    return setup


def _profile(text: bytes) -> Setup:
    """A keep with a REST backend 'dev' whose device profile file holds ``text``."""

    def setup(tmp: Path) -> list[str]:
        keep = _keep(tmp)
        profile = tmp / "profile.toml"
        profile.write_bytes(text)
        (Path(keep) / "config.toml").write_text(
            f'[backends.dev]\nadapter = "rest"\nprofile = "{profile}"\n'
            'url = "http://127.0.0.1:9"\ntoken_env = "JOBKEEPER_TEST_UNSET_TOKEN"\n'
        )
        return ["--keep", keep, "-b", "dev"]

    return setup


def _circuit(text: bytes) -> Setup:
    def setup(tmp: Path) -> list[str]:
        path = tmp / "circuit.qasm"
        path.write_bytes(text)
        return [str(path), "--keep", _keep(tmp)]

    return setup


def _plain(tmp: Path) -> list[str]:
    return ["--keep", _keep(tmp)]


def _nothing(tmp: Path) -> list[str]:
    return []


def _keys_mode(directory: int, key: int) -> Setup:
    """A keep whose keys directory and private key files have these modes."""

    def setup(tmp: Path) -> list[str]:
        keep = Path(_keep(tmp))
        for path in (keep / "keys").glob("*.key"):
            path.chmod(key)
        (keep / "keys").chmod(directory)
        return ["--keep", str(keep)]

    return setup


# 100,000 levels: far past the interpreter's recursion limit, which tomllib runs into.
DEEP_TOML = b"a = " + b"[" * 100_000 + b"]" * 100_000 + b"\n"
NOT_UTF8 = b"# \xff\xfe not UTF-8\n"

# (id, leading arguments, setup giving the arguments that follow)
CASES: list[tuple[str, list[str], Setup]] = [
    ("missing argument", ["show"], _nothing),
    ("missing argument of run", ["run"], _nothing),
    ("unknown command", ["frobnicate"], _nothing),
    ("unknown option", ["jobs", "--frobnicate"], _plain),
    ("unknown root option", ["--frobnicate", "jobs"], _nothing),
    ("shots not a number", ["run", BELL, "--shots", "abc"], _plain),
    ("seed not a number", ["run", BELL, "--seed", "abc"], _plain),
    ("shots zero", ["run", BELL, "--shots", "0"], _plain),
    ("shots negative", ["submit", BELL, "--shots", "-5"], _plain),
    ("repeat negative", ["run", BELL, "--repeat", "-1"], _plain),
    ("slots zero", ["worker", "--slots", "0"], _plain),
    ("in-flight zero", ["worker", "--in-flight", "0"], _plain),
    ("lease check zero", ["worker", "--lease-check", "0"], _plain),
    ("lease infinite", ["worker", "--lease", "inf"], _plain),
    ("lease not a number", ["worker", "--lease", "nan"], _plain),
    ("lease negative", ["worker", "--lease", "-5"], _plain),
    ("heartbeat infinite", ["worker", "--heartbeat", "inf", "--lease", "inf"], _plain),
    ("label with a newline", ["submit", BELL, "--label", "a\nb"], _plain),
    ("label with an escape", ["submit", BELL, "--label", "a\x1b[31mred"], _plain),
    ("label with a tab", ["run", BELL, "--label", "a\tb"], _plain),
    ("keys directory open to all", ["run", BELL], _keys_mode(0o777, 0o600)),
    ("key readable by others", ["run", BELL], _keys_mode(0o700, 0o644)),
    ("old sweep option", ["worker", "--sweep", "1"], _plain),
    ("heartbeat longer than lease", ["worker", "--heartbeat", "90"], _plain),
    ("port out of range", ["loopback-device", "--port", "99999", "--token", "t"], _nothing),
    ("fault rate out of range", ["loopback-device", "--fault-rate", "2", "--token", "t"], _nothing),
    ("unknown device preset", ["loopback-device", "--preset", "x", "--token", "t"], _nothing),
    ("root option and no command", ["--keep", "somewhere"], _nothing),
    ("timeout not a number", ["wait", "abc", "--timeout", "soon"], _plain),
    ("limit zero", ["jobs", "--limit", "0"], _plain),
    ("unknown state", ["jobs", "--state", "sleeping"], _plain),
    ("alpha out of range", ["compare", "a", "b", "--alpha", "2"], _plain),
    ("counts format", ["counts", "abc", "--format", "xml"], _plain),
    ("verify nothing", ["verify"], _plain),
    ("compare one job", ["compare", "abc"], _plain),
    ("unknown job", ["show", "ffffffffffff"], _plain),
    ("missing circuit file", ["run", "no-such-file.qasm"], _plain),
    ("circuit is a directory", ["check", "."], _plain),
    ("non-UTF-8 circuit", ["run"], _circuit(b"OPENQASM 2.0;\n// \xff\xfe\nqreg q[1];\n")),
    ("malformed circuit", ["run"], _circuit(b"OPENQASM 2.0;\nqreg q[1]\n")),
    ("unknown backend", ["run", BELL, "-b", "nowhere"], _plain),
    ("adapter a module path", ["run", BELL, "-b", "x"], _config(b'[backends.x]\nadapter = "os.path:join"\n')),
    ("adapter not a name", ["run", BELL, "-b", "x"], _config(b"[backends.x]\nadapter = 3\n")),
    ("adapter unknown", ["run", BELL, "-b", "x"], _config(b'[backends.x]\nadapter = "nowhere"\n')),
    ("non-UTF-8 config", ["jobs"], _config(NOT_UTF8)),
    ("deeply nested config", ["jobs"], _config(DEEP_TOML)),
    ("config not TOML", ["jobs"], _config(b"[defaults\n")),
    ("config unknown key", ["jobs"], _config(b"[defaults]\nshots = 10\ncolour = 1\n")),
    ("non-UTF-8 profile", ["run", BELL], _profile(NOT_UTF8)),
    ("deeply nested profile", ["run", BELL], _profile(DEEP_TOML)),
    ("profile not a profile", ["run", BELL], _profile(b'name = "x"\n')),
]  # fmt: skip


def test_at_least_25_cases() -> None:
    assert len(CASES) >= 25


@pytest.mark.parametrize(("head", "setup"), [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_bad_invocation_exits_2_with_one_line(
    capsys: pytest.CaptureFixture[str], tmp_path: Path, head: list[str], setup: Setup
) -> None:
    args = head + setup(tmp_path)
    capsys.readouterr()
    code = main(args)
    out, err = capsys.readouterr()
    assert code == 2, (args, err)
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("jobkeeper") and len(lines[0]) > 20, err
    assert "Traceback" not in err
    assert out == ""


def test_usage_errors_of_the_installed_framework_are_caught() -> None:
    import typer

    # typer.BadParameter is what typer raises for a malformed value, from whatever copy
    # of click it uses: it must be one of the classes the entry point catches.
    assert issubclass(typer.BadParameter, usage_error_bases())


@pytest.mark.parametrize(
    "args",
    [["show"], ["run", BELL, "--shots", "abc"], ["--keep"], ["worker", "--slots", "0"]],
)
def test_the_installed_command_answers_in_one_line(tmp_path: Path, args: list[str]) -> None:
    # Through the real entry point, in a fresh interpreter: nothing in the test process
    # (an imported click, a patched handler) can make this pass by accident.
    proc = subprocess.run(
        [sys.executable, "-m", "jobkeeper", *args],
        capture_output=True, text=True, timeout=60, check=False, cwd=tmp_path,
    )  # fmt: skip
    assert proc.returncode == 2, proc.stderr
    assert len(proc.stderr.splitlines()) == 1 and "Traceback" not in proc.stderr
    assert proc.stdout == ""


def test_no_command_shows_the_help_and_exits_2(capsys: pytest.CaptureFixture[str]) -> None:
    code = main([])
    out, err = capsys.readouterr()
    assert code == 2
    assert "run" in out + err and "Traceback" not in out + err


def test_keep_and_store_before_the_command(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    keep = str(tmp_path / "k")
    assert main(["--keep", keep, "init"]) == 0
    assert main(["--keep", keep, "run", BELL, "--seed", "2"]) == 0
    capsys.readouterr()
    assert main(["--keep", keep, "jobs", "--json"]) == 0
    before = capsys.readouterr().out
    assert main(["jobs", "--json", "--keep", keep]) == 0
    assert capsys.readouterr().out == before and '"state": "done"' in before


def test_keep_after_the_command_wins_over_before_and_environment(
    capsys: pytest.CaptureFixture[str], tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    used, other = str(tmp_path / "used"), str(tmp_path / "other")
    assert main(["init", "--keep", other]) == 0
    monkeypatch.setenv("JOBKEEPER_KEEP", other)
    assert main(["--keep", other, "init", "--keep", used, "--json"]) == 0
    assert str(Path(used).resolve()) in capsys.readouterr().out
    # Before the command beats the environment.
    assert main(["--keep", used, "init", "--json"]) == 0
    assert str(Path(used).resolve()) in capsys.readouterr().out
    # The environment alone still works.
    assert main(["init", "--json"]) == 0
    assert str(Path(other).resolve()) in capsys.readouterr().out


@pytest.mark.parametrize(("directory", "key"), [(0o777, 0o600), (0o700, 0o644), (0o720, 0o600)])
def test_a_key_that_cannot_be_used_queues_nothing(
    capsys: pytest.CaptureFixture[str], tmp_path: Path, directory: int, key: int
) -> None:
    # `run` refuses before its job is queued: no row is left behind for a worker to pick up.
    args = _keys_mode(directory, key)(tmp_path)
    assert main(["run", BELL, *args]) == 2
    capsys.readouterr()
    (tmp_path / "keep" / "keys").chmod(0o700)
    assert main(["jobs", "--json", *args]) == 0
    assert capsys.readouterr().out.strip() == "[]"
