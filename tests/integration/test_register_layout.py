"""Count keys of a circuit with several classical registers, end to end: every simulator,
the REST adapter reading the loopback device, the readers (counts, CSV, export), the
comparisons and the signed layout agree on one layout (DESIGN §4, count keys): registers
in declaration order, the first declared leftmost, joined by "|"; within a register its
value in binary, the highest index leftmost.

The circuit and every expected value below are worked out by hand (an invented circuit):

    a[2]:    a[0] = 1 (x on q[0]), a[1] = 0 (q[1] measured in |0>)      -> a = "01"
    flag[1]: flag[0] = 1 (x on q[2])                                     -> flag = "1"
    b[2]:    b[1] = a fair coin (h on q[3]); b[0] is never written (0)   -> b = "00" or "10"

so the keys are "01|1|00" and "01|1|10", each with probability 1/2.
"""

from __future__ import annotations

import csv
import io
import json
import sqlite3
from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.loopback.testing import running_device
from tests.integration.helpers import jk
from tests.integration.test_rest_worker import rest_keep

PROGRAM = """OPENQASM 2.0;
include "qelib1.inc";
qreg q[4];
creg a[2];
creg flag[1];
creg b[2];
x q[0];
x q[2];
h q[3];
measure q[0] -> a[0];
measure q[1] -> a[1];
measure q[2] -> flag[0];
measure q[3] -> b[1];
"""
KEYS = {"01|1|00", "01|1|10"}  # by hand, see the module docstring
LAYOUT = [{"name": "a", "width": 2}, {"name": "flag", "width": 1}, {"name": "b", "width": 2}]
CSV_HEADER = ["outcome", "reg_a", "reg_flag", "reg_b", "count"]
CSV_SPLIT = {"01|1|00": ["01", "1", "00"], "01|1|10": ["01", "1", "10"]}


@pytest.fixture(scope="module")
def keep(tmp_path_factory: pytest.TempPathFactory) -> Path:
    keep = tmp_path_factory.mktemp("registers") / "keep"
    keep.mkdir()
    (keep / "config.toml").write_text(
        '[backends.dm]\nadapter = "densitymatrix"\n\n[backends.traj]\nadapter = "trajectories"\n'
    )
    return keep


@pytest.mark.parametrize("backend", ["statevector", "dm", "traj"])
def test_every_simulator_writes_the_keys_worked_out_by_hand(keep: Path, backend: str) -> None:
    with Keeper.open(keep) as keeper:
        job = keeper.run(PROGRAM, backend=backend, shots=400, seed=11)
        assert set(job.counts) == KEYS and sum(job.counts.values()) == 400
        assert job.registers.to_json() == LAYOUT
        manifest = keeper.manifest(job)
        assert manifest["predicateType"] == "urn:jobkeeper:predicate:run:v2"
        assert manifest["predicate"]["registers"] == LAYOUT
        if backend != "traj":  # trajectories sample; they have no exact probabilities
            exact = keeper.run(PROGRAM, backend=backend, shots=400, seed=11, exact=True)
            assert exact.result is not None and exact.result.probabilities is not None
            assert exact.result.probabilities == pytest.approx({k: 0.5 for k in KEYS}, abs=1e-9)
        assert keeper.verify().ok


def test_csv_json_and_export_split_the_keys_by_register(
    keep: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    with Keeper.open(keep) as keeper:
        job = keeper.run(PROGRAM, shots=200, seed=5)
        counts = job.counts
    code, out, err = jk(capsys, "counts", job.id, "--format", "csv", "--keep", str(keep))
    assert code == 0, err
    rows = list(csv.reader(io.StringIO(out)))
    assert rows[0] == CSV_HEADER
    assert [row[:4] for row in rows[1:]] == [[k, *CSV_SPLIT[k]] for k in sorted(KEYS)]
    assert {row[0]: int(row[4]) for row in rows[1:]} == counts
    code, out, err = jk(capsys, "counts", job.id, "--keep", str(keep))
    assert code == 0, err
    document = json.loads(out)
    assert document["count_keys"] == {
        "registers": LAYOUT, "separator": "|", "first_declared": "leftmost",
    }  # fmt: skip
    assert document["counts"] == counts
    code, out, err = jk(capsys, "show", job.id, "--keep", str(keep))
    assert code == 0 and "keys       a[2]|flag[1]|b[2]" in out, out + err
    target = tmp_path / "out.db"
    code, out, err = jk(capsys, "export", "-o", str(target), "--keep", str(keep))
    assert code == 0, err
    with sqlite3.connect(target) as conn:
        exported = conn.execute(
            "SELECT outcome, reg_a, reg_flag, reg_b, count FROM counts WHERE job_id = ?",
            (job.id,),
        ).fetchall()
        (described,) = conn.execute(
            "SELECT count_keys FROM jobs WHERE id = ?", (job.id,)
        ).fetchone()
    assert exported == [(k, *CSV_SPLIT[k], counts[k]) for k in sorted(KEYS)]
    assert json.loads(described)["registers"] == LAYOUT


def test_comparisons_read_one_layout(keep: Path) -> None:
    with Keeper.open(keep) as keeper:
        a = keeper.run(PROGRAM, shots=400, seed=21)
        b = keeper.run(PROGRAM, backend="dm", shots=400, seed=22)
        assert keeper.compare(a, b).record.verdict == "consistent"
        assert keeper.compare(a, ideal=True).record.verdict == "consistent"


def test_the_loopback_device_and_the_rest_adapter_agree(tmp_path: Path) -> None:
    with running_device() as device:
        keep = rest_keep(tmp_path, device)
        import os

        os.environ[device.token_env] = device.token
        try:
            with Keeper.open(keep) as keeper:
                job = keeper.run(PROGRAM, backend="dev", shots=100, seed=3, timeout=60)
                assert job.state == "done", job.record.error
                assert set(job.counts) == KEYS
                assert job.registers.to_json() == LAYOUT
        finally:
            os.environ.pop(device.token_env, None)


def test_an_edited_register_name_is_caught_by_verify(keep: Path, tmp_path: Path) -> None:
    import shutil

    copy = tmp_path / "keep"
    shutil.copytree(keep, copy)
    with Keeper.open(copy) as keeper:
        job = keeper.run(PROGRAM, shots=50, seed=9)
    conn = sqlite3.connect(copy / "archive.db")
    with conn:
        (text,) = conn.execute("SELECT spec FROM jobs WHERE id = ?", (job.id,)).fetchone()
        doc = json.loads(text)
        doc["registerNames"] = ["a", "b", "flag"]
        conn.execute("UPDATE jobs SET spec = ? WHERE id = ?", (json.dumps(doc), job.id))
    conn.close()
    with Keeper.open(copy, create=False) as keeper:
        report = keeper.verify()
    assert not report.ok
    assert any("register layout" in problem for problem in report.problems), report.problems
