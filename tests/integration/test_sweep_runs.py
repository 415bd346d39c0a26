"""Sweeps through the Python API and the command line, on a real keep: a sweep's points
are jobs with their bindings, the same sweep again adds nothing, a point and its literal
twin are one job, every point verifies, and an edited binding is caught by verify.

The programs are invented for the tests: an angle scan of two rotations and a CNOT.
"""

from __future__ import annotations

import csv
import io
import json
import sqlite3
from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.cli import main
from jobkeeper.exceptions import ConfigError

SCAN = """OPENQASM 3.0;
include "stdgates.inc";
input float[64] theta;
input float[64] phi;
qubit[2] q;
bit[2] c;
rx(theta) q[0];
ry(phi) q[1];
cx q[0], q[1];
c = measure q;
"""


def twin(theta: str, phi: str) -> str:
    """The same operations written out in OpenQASM 2.0 with literal values."""
    return (
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c[2];\n'
        f"rx({theta}) q[0];\nry({phi}) q[1];\ncx q[0],q[1];\nmeasure q -> c;\n"
    )


@pytest.fixture
def scan(tmp_path: Path) -> Path:
    path = tmp_path / "scan.qasm"
    path.write_text(SCAN)
    return path


def test_a_sweep_runs_as_jobs_with_their_bindings(tmp_path: Path, scan: Path) -> None:
    with Keeper.open(tmp_path / "keep") as keeper:
        run = keeper.submit_sweep(scan, axes=["theta=0:1:3"], inputs=["phi=0.25"],
                                  shots=40, seed=9)  # fmt: skip
        assert len(run) == 3 and run.id.startswith("sw-")
        assert [p.texts() for p in run.points] == [
            {"theta": t, "phi": "0.25"} for t in ("0", "0.5", "1")
        ]
        again = keeper.submit_sweep(scan, axes=["theta=0:1:3"], inputs=["phi=0.25"],
                                    shots=40, seed=9)  # fmt: skip
        assert again.id == run.id and all(s.deduplicated for s in again.submitted or [])
        assert keeper.count_jobs() == 3
        jobs = run.wait(timeout=60)
        assert [j.state for j in jobs] == ["done"] * 3
        # The literal twin of the middle point is that point's job (one job key).
        literal = keeper.run(twin("0.5", "0.25"), shots=40, seed=9)
        assert literal.id == jobs[1].id and keeper.count_jobs() == 3
        rows = run.table()
        assert {row["theta"] for row in rows} == {0.0, 0.5, 1.0}
        assert sum(row["count"] for row in rows) == 3 * 40
        spec = jobs[2].spec
        assert spec.bindings is not None and spec.bindings.texts() == {"theta": "1", "phi": "0.25"}
        assert spec.template_text == SCAN
        assert keeper.verify().ok


def test_python_sweep_over_values(tmp_path: Path, scan: Path) -> None:
    with Keeper.open(tmp_path / "keep") as keeper:
        run = keeper.sweep(scan, {"theta": [0.1, 0.2], "phi": [0, 1.5]}, shots=20, seed=1)
        # The first input changes slowest (nested loops, as itertools.product).
        assert [p.texts() for p in run.points] == [
            {"theta": "0.1", "phi": "0"}, {"theta": "0.1", "phi": "1.5"},
            {"theta": "0.2", "phi": "0"}, {"theta": "0.2", "phi": "1.5"},
        ]  # fmt: skip
        assert [j.state for j in run.wait(timeout=60)] == ["done"] * 4
        assert keeper.jobs(sweep=run.id[:8])[0].spec.bindings is not None
        with pytest.raises(ConfigError, match="not a number"):
            keeper.sweep(scan, {"theta": ["x"], "phi": [0]})
        with pytest.raises(ConfigError, match="no input named psi"):
            keeper.sweep(scan, {"psi": [1.0]}, inputs=["theta=0", "phi=0"])
        with pytest.raises(ConfigError, match="without a value: phi"):
            keeper.sweep(scan, {"theta": [1.0]})


def test_an_edited_binding_is_caught_by_verify(tmp_path: Path, scan: Path) -> None:
    keep = tmp_path / "keep"
    with Keeper.open(keep) as keeper:
        job = keeper.run(scan, inputs=["theta=0.5", "phi=1"], shots=10, seed=2)
        assert job.state == "done" and keeper.verify().ok
    db = sqlite3.connect(keep / "archive.db")
    spec = json.loads(db.execute("SELECT spec FROM jobs WHERE id = ?", (job.id,)).fetchone()[0])
    spec["bindings"][0]["text"] = "0.75"
    db.execute("UPDATE jobs SET spec = ? WHERE id = ?", (json.dumps(spec), job.id))
    db.commit()
    db.close()
    with Keeper.open(keep) as keeper:
        report = keeper.verify()
    assert not report.ok and any("bindings" in p for p in report.problems), report.problems


def jk(capsys: pytest.CaptureFixture[str], *args: str) -> tuple[int, str, str]:
    code = main(list(args))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_sweep_commands(capsys, tmp_path: Path, scan: Path) -> None:
    keep = ["--keep", str(tmp_path / "keep")]
    code, out, _ = jk(capsys, "submit", str(scan), "--sweep", "theta=0:1:2",
                      "--sweep", "phi=0:0.5:2", "--shots", "30", "--seed", "5", "--json", *keep)  # fmt: skip
    assert code == 0
    records = json.loads(out)
    assert len(records) == 4 and len({r["sweep"] for r in records}) == 1
    assert records[1]["bindings"] == {"theta": 0.0, "phi": 0.5}
    assert all(not r["deduplicated"] for r in records)
    sweep = records[0]["sweep"]
    code, out, _ = jk(capsys, "submit", str(scan), "--sweep", "theta=0:1:2",
                      "--sweep", "phi=0:0.5:2", "--shots", "30", "--seed", "5", *keep)  # fmt: skip
    assert code == 0 and "4 points, 0 queued" in out
    code, out, _ = jk(capsys, "jobs", "--sweep", sweep[:7], "--json", *keep)
    assert code == 0 and len(json.loads(out)) == 4
    assert jk(capsys, "worker", "--once", *keep)[0] == 0
    code, out, _ = jk(capsys, "wait", sweep, *keep)
    assert code == 0 and out.count("done") == 4
    code, out, _ = jk(capsys, "show", sweep[:8], "--json", *keep)
    shown = json.loads(out)
    assert code == 0 and shown["points"] == 4 and shown["states"] == {"done": 4}
    code, out, _ = jk(capsys, "counts", sweep, "--format", "csv", *keep)
    rows = list(csv.reader(io.StringIO(out)))
    # a column per classical register (reg_<name>) beside the key
    assert code == 0 and rows[0] == ["theta", "phi", "outcome", "reg_c", "count"]
    assert all(row[2] == row[3] for row in rows[1:])  # one register: its value is the key
    # Each point's counts sum to its shots; the inputs keep the text they were given.
    per_point: dict[tuple[str, str], int] = {}
    for theta, phi, _, _, count in rows[1:]:
        per_point[(theta, phi)] = per_point.get((theta, phi), 0) + int(count)
    assert per_point == {(t, p): 30 for t in ("0", "1") for p in ("0", "0.5")}
    code, out, _ = jk(capsys, "counts", sweep, *keep)
    assert code == 0 and len(json.loads(out)) == 4


def test_points_file_and_refusals(capsys, tmp_path: Path, scan: Path) -> None:
    keep = ["--keep", str(tmp_path / "keep")]
    points = tmp_path / "points.csv"
    points.write_text("theta,phi\n0.1,0.2\n0.30,0.4\n")
    code, out, _ = jk(capsys, "submit", str(scan), "--points", str(points), "--json", *keep)
    assert code == 0 and [r["bindings"]["theta"] for r in json.loads(out)] == [0.1, 0.3]
    refusals = [
        (["run", str(scan), "--set", "theta=1"], "without a value: phi"),
        (["run", str(scan), "--set", "theta=1", "--set", "phi=inf"], "input phi"),
        (["run", str(scan), "--set", "theta=1", "--set", "phi=1", "--set", "x=1"],
         "no input named x"),
        (["submit", str(scan), str(scan), "--sweep", "theta=0:1:2", "--set", "phi=0"],
         "exactly one FILE"),
        (["submit", str(scan), "--sweep", "theta=0:1:2"], "without a value: phi"),
        (["show", "sw-0"], "no sweep matches"),
    ]  # fmt: skip
    for args, words in refusals:
        code, _, err = jk(capsys, *args, *keep)
        assert code == 2 and words in err and "Traceback" not in err, (args, err)
