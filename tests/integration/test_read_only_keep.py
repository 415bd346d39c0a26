"""A read-only keep (a read-only mount, or a keep whose files this user may not write)
serves every read command: jobs, show, counts, verify, bundle and export to a path
outside the keep. SQLite opens it read-only and makes no file beside the archive (no WAL,
no shared memory). A write is refused with exit 3 and one line; no job is marked failed.
A keep with no witness yet says at verify that none could be written, and still verifies."""

from __future__ import annotations

import gc
import json
from pathlib import Path

import pytest

from jobkeeper.cli import main
from tests.integration.mounts import read_only_view

REPO = Path(__file__).resolve().parents[2]
BELL = str(REPO / "examples" / "circuits" / "bell.qasm")
GHZ = str(REPO / "examples" / "circuits" / "ghz5.qasm")


def _run(capsys: pytest.CaptureFixture[str], *args: str) -> tuple[int, str, str]:
    capsys.readouterr()
    code = main(list(args))
    out, err = capsys.readouterr()
    assert "Traceback" not in err, err
    return code, out, err


@pytest.fixture
def source(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> Path:
    keep = tmp_path / "source" / "keep"
    for seed in ("1", "2"):
        assert main(["run", BELL, "--shots", "64", "--seed", seed, "--keep", str(keep)]) == 0
    assert main(["submit", GHZ, "--shots", "64", "--keep", str(keep)]) == 0  # left queued
    capsys.readouterr()
    gc.collect()  # the commands' connections are closed: SQLite folds its WAL file away
    return keep


@pytest.mark.parametrize("witness", [True, False], ids=["with-witness", "no-witness-yet"])
def test_every_read_command_serves_a_read_only_keep(
    tmp_path: Path, source: Path, capsys: pytest.CaptureFixture[str], witness: bool
) -> None:
    if not witness:
        (source / "witness.json").unlink()
    before = sorted(p.name for p in source.iterdir())
    assert "archive.db-wal" not in before
    with read_only_view(source.parent, tmp_path / "ro") as view:
        keep = str(view / "keep")
        code, out, _ = _run(capsys, "jobs", "--json", "--keep", keep)
        assert code == 0
        jobs = json.loads(out)
        assert sorted(j["state"] for j in jobs) == ["done", "done", "queued"]
        done = next(j["id"] for j in jobs if j["state"] == "done")
        for args in (["show", done], ["counts", done], ["show", done, "--json"]):
            code, out, _ = _run(capsys, *args, "--keep", keep)
            assert code == 0 and out, args
        code, out, err = _run(capsys, "verify", "--all", "--keep", keep)
        assert code == 0, out + err
        if not witness:
            assert "no witness could be written" in out + err
        bundle, export = tmp_path / "out" / "b.json", tmp_path / "out" / "e.db"
        bundle.parent.mkdir()
        assert _run(capsys, "bundle", done, "-o", str(bundle), "--keep", keep)[0] == 0
        assert _run(capsys, "verify", str(bundle), "--keep", keep)[0] == 0
        assert _run(capsys, "export", "-o", str(export), "--keep", keep)[0] == 0
        for args in (["submit", GHZ, "--shots", "99"], ["run", BELL, "--seed", "9"],
                     ["worker", "--once"]):  # fmt: skip
            code, out, err = _run(capsys, *args, "--keep", keep)
            assert code == 3, (args, out, err)
            last = err.strip().splitlines()[-1]
            assert "read-only" in last and last.startswith("jobkeeper: "), err
        code, out, _ = _run(capsys, "jobs", "--json", "--keep", keep)
        assert sorted(j["state"] for j in json.loads(out)) == ["done", "done", "queued"]
    # nothing was made beside the archive (no -wal, no -shm), nothing changed
    assert sorted(p.name for p in source.iterdir()) == before
