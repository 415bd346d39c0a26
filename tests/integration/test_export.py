"""``jobkeeper export``: a tidy SQLite file of jobs and counts, read back here with plain
sqlite3 (the standard library's driver, nothing of ours). What is checked: the rows
match the archive, the counts of each sampled job add up to its shots (common practice:
every shot gives exactly one outcome), a Bell pair gives only 00 and 11 (Nielsen & Chuang
§1.3.6), and the file is refused where it could overwrite something or land in the keep."""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.cli import main
from tests.integration.helpers import circuit_text

BELL = circuit_text(0.0)


def rows(path: Path, query: str) -> list[tuple]:
    conn = sqlite3.connect(path)
    try:
        return conn.execute(query).fetchall()
    finally:
        conn.close()


@pytest.fixture
def keep(tmp_path: Path) -> Path:
    keep = tmp_path / "keep"
    with Keeper.open(keep) as keeper:
        keeper.run(BELL, shots=300, seed=7, labels={"fig3"})
        keeper.run(circuit_text(0.4), shots=120, seed=8, labels={"fig3"})
        keeper.run(circuit_text(0.9), shots=50, seed=9, labels={"other"})
        keeper.run(BELL, shots=300, seed=7, labels={"other"})  # the fig3 job, now also "other"
        keeper.run(BELL, exact=True, labels={"fig3"})
        keeper.submit(circuit_text(1.3), shots=10, labels={"fig3"})  # still queued
    return keep


def test_export_writes_one_row_per_job_and_per_outcome(
    keep: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "results.db"
    code = main(["export", "--label", "fig3", "-o", str(out), "--keep", str(keep), "--json"])
    assert code == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["jobs"] == 4 and out.exists()
    assert not list(tmp_path.glob(".results.db*"))  # no partial file left behind
    tables = {r[0] for r in rows(out, "SELECT name FROM sqlite_master WHERE type = 'table'")}
    assert tables == {"jobs", "counts", "probabilities", "export"}
    jobs = {
        r[0]: r[1:]
        for r in rows(out, "SELECT id, state, shots, seed, labels, bindings, backend, "
                           "circuit_hash, exact FROM jobs")
    }  # fmt: skip
    with Keeper.open(keep, create=False) as keeper:
        fig3 = {j.id: j for j in keeper.jobs(label="fig3")}
        assert set(jobs) == set(fig3)
        for job_id, (state, shots, seed, labels, bindings, backend, chash, exact) in jobs.items():
            record = fig3[job_id].record
            assert (state, shots, backend) == (record.state, record.spec.shots, record.spec.backend)
            assert json.loads(labels) == list(record.labels) and "fig3" in json.loads(labels)
            assert json.loads(bindings) == {} and chash == record.spec.circuit_hash
            if state == "done" and not exact:
                assert seed == record.spec.seed  # the seed it ran with, as signed
                total = rows(out, f"SELECT SUM(count) FROM counts WHERE job_id = '{job_id}'")
                assert total == [(shots,)]
                assert dict(rows(out, f"SELECT outcome, count FROM counts "
                                      f"WHERE job_id = '{job_id}'")) == fig3[job_id].counts  # fmt: skip
    bell = [i for i, j in jobs.items() if json.loads(j[3]) == ["fig3", "other"]]
    assert len(bell) == 1  # the deduplicated Bell job carries both labels
    outcomes = rows(out, f"SELECT outcome FROM counts WHERE job_id = '{bell[0]}' ORDER BY 1")
    assert outcomes == [("00",), ("11",)]
    # the exact run: probabilities 1/2 and 1/2 (Nielsen & Chuang §1.3.6), no counts
    [exact_id] = [i for i, j in jobs.items() if j[7] == 1]
    probs = rows(out, f"SELECT outcome, probability FROM probabilities WHERE job_id = '{exact_id}'")
    assert sorted(probs) == [("00", pytest.approx(0.5)), ("11", pytest.approx(0.5))]
    assert rows(out, "SELECT COUNT(*) FROM jobs WHERE state = 'queued'") == [(1,)]
    [(label, note)] = rows(out, "SELECT label, note FROM export")
    assert label == "fig3" and "unsigned" in note


def test_export_refuses_to_overwrite_without_force_and_to_write_into_the_keep(
    keep: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "results.db"
    out.write_text("someone's file")
    assert main(["export", "-o", str(out), "--keep", str(keep)]) == 2
    assert "--force" in capsys.readouterr().err
    assert out.read_text() == "someone's file"
    assert main(["export", "-o", str(out), "--keep", str(keep), "--force"]) == 0
    assert rows(out, "SELECT COUNT(*) FROM jobs") == [(5,)]  # six runs, one deduplicated
    inside = keep / "results.db"
    assert main(["export", "-o", str(inside), "--keep", str(keep)]) == 2
    assert "inside the keep" in capsys.readouterr().err and not inside.exists()
    assert main(["export", "-o", str(tmp_path / "no" / "such" / "r.db"), "--keep", str(keep)]) == 2


def test_export_refuses_an_archive_whose_counts_do_not_verify(keep: Path, tmp_path: Path) -> None:
    conn = sqlite3.connect(keep / "archive.db")
    [(job_id, counts)] = conn.execute(
        "SELECT job_id, counts FROM results WHERE counts LIKE '%00%' LIMIT 1"
    ).fetchall()
    doctored = json.loads(counts)
    doctored["00"] += 1
    conn.execute("UPDATE results SET counts = ? WHERE job_id = ?", (json.dumps(doctored), job_id))
    conn.commit()
    conn.close()
    with Keeper.open(keep, create=False) as keeper:
        from jobkeeper.exceptions import VerificationError

        with pytest.raises(VerificationError, match="does not verify"):
            keeper.export(tmp_path / "results.db")
    assert not (tmp_path / "results.db").exists()
