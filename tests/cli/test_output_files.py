"""Output files (bundle -o, keys --export, export -o): never over an existing file without
--force, never inside the keep or over its archive (not even with --force), written under
a temporary name and renamed. Each refusal is exit 2 with one line, and the file that was
there is byte for byte what it was."""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest

from jobkeeper.cli import main
from jobkeeper.exceptions import ConfigError
from jobkeeper.outputs import atomic_output, check_output, write_output

REPO = Path(__file__).resolve().parents[2]
BELL = str(REPO / "examples" / "circuits" / "bell.qasm")


@pytest.fixture
def keep(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> Path:
    keep = tmp_path / "keep"
    assert (
        main(["run", BELL, "--shots", "50", "--seed", "3", "--label", "a", "--keep", str(keep)])
        == 0
    )
    capsys.readouterr()
    return keep


def _refused(capsys: pytest.CaptureFixture[str], args: list[str], *words: str) -> None:
    capsys.readouterr()
    assert main(args) == 2, args
    out, err = capsys.readouterr()
    assert out == "" and len(err.splitlines()) == 1 and "Traceback" not in err, err
    for word in words:
        assert word in err, err


def _jobs_done(keep: Path) -> int:
    with sqlite3.connect(keep / "archive.db") as conn:
        return int(conn.execute("SELECT count(*) FROM jobs WHERE state = 'done'").fetchone()[0])


# Each command that writes a file for the user, with the option that names the file.
WRITERS = [
    ("bundle", ["bundle", "--label", "a", "-o"]),
    ("keys --export", ["keys", "--export"]),
    ("export", ["export", "-o"]),
]


@pytest.mark.parametrize(("name", "head"), WRITERS, ids=[w[0] for w in WRITERS])
def test_an_existing_file_is_kept_unless_force(
    capsys: pytest.CaptureFixture[str], keep: Path, tmp_path: Path, name: str, head: list[str]
) -> None:
    target = tmp_path / "precious.txt"
    target.write_bytes(b"the user's own file\n")
    _refused(capsys, [*head, str(target), "--keep", str(keep)], "exists", "--force")
    assert target.read_bytes() == b"the user's own file\n"
    assert main([*head, str(target), "--keep", str(keep), "--force"]) == 0
    assert target.read_bytes() != b"the user's own file\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["keep", "precious.txt"]  # no leftovers


@pytest.mark.parametrize(("name", "head"), WRITERS, ids=[w[0] for w in WRITERS])
@pytest.mark.parametrize(
    "inside", ["archive.db", "archive.db-wal", "config.toml", "new.json", "keys/x"]
)
@pytest.mark.parametrize("force", [False, True])
def test_nothing_is_written_inside_the_keep_even_with_force(
    capsys: pytest.CaptureFixture[str], keep: Path, name: str, head: list[str], inside: str,
    force: bool,
) -> None:  # fmt: skip
    target = keep / inside
    # (the archive's files are the store's own: opening the keep may checkpoint its WAL;
    # verify below shows they were not replaced)
    before = target.read_bytes() if inside == "config.toml" else None
    args = [*head, str(target), "--keep", str(keep)] + (["--force"] if force else [])
    _refused(capsys, args, "inside the keep")
    if before is not None:
        assert target.read_bytes() == before
    assert target.exists() == (inside not in ("new.json", "keys/x"))
    assert main(["verify", "--all", "--keep", str(keep)]) == 0
    assert _jobs_done(keep) == 1


def test_a_link_into_the_keep_is_refused(
    capsys: pytest.CaptureFixture[str], keep: Path, tmp_path: Path
) -> None:
    link = tmp_path / "innocent.json"
    link.symlink_to(keep / "archive.db")
    _refused(capsys, ["bundle", "--label", "a", "-o", str(link), "--keep", str(keep), "--force"],
             "inside the keep")  # fmt: skip
    assert _jobs_done(keep) == 1


def test_an_archive_kept_outside_the_keep_is_guarded_too(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    keep, archive = tmp_path / "keep", tmp_path / "elsewhere" / "jobs.db"
    assert main(["run", BELL, "--label", "a", "--keep", str(keep), "--store", str(archive)]) == 0
    _refused(capsys, ["bundle", "--label", "a", "-o", str(archive), "--force", "--keep", str(keep),
                      "--store", str(archive)], "inside the keep")  # fmt: skip
    assert main(["verify", "--all", "--keep", str(keep), "--store", str(archive)]) == 0


def test_keys_export_writes_the_public_key(capsys: pytest.CaptureFixture[str], keep: Path) -> None:
    out = keep.parent / "key.json"
    assert main(["keys", "--export", str(out), "--keep", str(keep), "--json"]) == 0
    shown = json.loads(capsys.readouterr().out)
    assert json.loads(out.read_text()) == {
        "fingerprint": shown["fingerprint"],
        "public_key": shown["public_key"],
    }


def test_a_file_that_appears_while_writing_is_not_replaced(tmp_path: Path) -> None:
    target = tmp_path / "out.json"
    with pytest.raises(ConfigError, match="exists"), atomic_output(target) as partial:
        partial.write_text("ours")
        target.write_text("someone else's")  # taken between the check and the rename
    assert target.read_text() == "someone else's"
    assert [p.name for p in tmp_path.iterdir()] == ["out.json"]


def test_a_failed_write_leaves_the_old_file_and_no_temporary(tmp_path: Path) -> None:
    target = tmp_path / "out.json"
    target.write_text("old")
    with pytest.raises(RuntimeError), atomic_output(target, force=True) as partial:
        partial.write_text("half")
        raise RuntimeError("the writer broke")
    assert target.read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["out.json"]


def test_directories_and_missing_parents_are_refused(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="directory"):
        check_output(tmp_path, force=True)
    with pytest.raises(ConfigError, match="no directory"):
        write_output(tmp_path / "nowhere" / "x.json", "x")
