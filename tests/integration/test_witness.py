"""The witness: the keep remembers its latest signed checkpoint outside the database, and
``verify`` proves the log extends it (and any bundle or checkpoint kept elsewhere).

Published principle, not values: an append-only Merkle log proves that a later tree
extends an earlier one with a consistency proof (RFC 9162 §2.1.4); a verifier that
remembers an earlier signed checkpoint detects rollbacks and rewrites that the log alone
cannot show (the "witness" idea of transparency logs, C2SP tlog-witness).
"""

from __future__ import annotations

import json
import shutil
import sqlite3
from pathlib import Path

import pytest

from jobkeeper import Keeper
from tests.integration.helpers import circuit_text, jk


@pytest.fixture(scope="module")
def made(tmp_path_factory: pytest.TempPathFactory) -> Path:
    keep = tmp_path_factory.mktemp("witness") / "keep"
    with Keeper.open(keep) as keeper:
        for batch in range(3):  # three finishing transactions: three checkpoints
            keeper.run_many([circuit_text(0.2 * (2 * batch + i)) for i in range(2)], shots=32)
    return keep


@pytest.fixture
def keep(made: Path, tmp_path: Path) -> Path:
    copy = tmp_path / "keep"
    shutil.copytree(made, copy)
    return copy


def _sql(keep: Path, *statements: str) -> None:
    conn = sqlite3.connect(keep / "archive.db")
    with conn:
        for statement in statements:
            conn.execute(statement)
    conn.close()


def test_each_commit_writes_the_witness(keep: Path) -> None:
    doc = json.loads((keep / "witness.json").read_text())
    assert doc["format"] == "jobkeeper-witness/v1" and doc["size"] == 6
    with Keeper.open(keep, create=False) as keeper:
        assert doc["checkpoint"] == keeper.store.checkpoints()[-1].note
        assert doc["origin"] == keeper.store.get_meta("origin")
        keeper.run(circuit_text(3.0), shots=16)
    assert json.loads((keep / "witness.json").read_text())["size"] == 7


def _roll_back(keep: Path, entries: int) -> None:
    """Delete the last ``entries`` log entries with their checkpoints and results, set the
    jobs back to queued and the log state to what the shorter log gives: a consistent
    older archive, as a restored backup or a careful attacker would leave it."""
    from jobkeeper.audit.sealing import log_state_of

    conn = sqlite3.connect(keep / "archive.db")
    with conn:
        size = conn.execute("SELECT COUNT(*) FROM log_entries").fetchone()[0] - entries
        gone = [r[0] for r in conn.execute("SELECT job_id FROM log_entries WHERE idx >= ?",
                                           (size,))]  # fmt: skip
        conn.execute("DELETE FROM log_entries WHERE idx >= ?", (size,))
        conn.execute("DELETE FROM checkpoints WHERE size > ?", (size,))
        for job_id in gone:
            conn.execute("DELETE FROM results WHERE job_id = ?", (job_id,))
            conn.execute("UPDATE jobs SET state = 'queued', finished_at = NULL WHERE id = ?",
                         (job_id,))  # fmt: skip
        leaves = [bytes(r[0]) for r in conn.execute("SELECT leaf_hash FROM log_entries "
                                                   "ORDER BY idx")]  # fmt: skip
        conn.execute("UPDATE log_state SET size = ?, state = ?", (size, log_state_of(leaves)))
    conn.close()


@pytest.mark.parametrize("entries", [2, 4])
def test_a_rolled_back_archive_fails_against_the_witness(
    keep: Path, capsys: pytest.CaptureFixture[str], entries: int
) -> None:
    _roll_back(keep, entries)
    witness = (keep / "witness.json").read_bytes()
    (keep / "witness.json").unlink()  # without the witness, the shorter log holds
    assert jk(capsys, "verify", "--all", "--keep", str(keep))[0] == 0
    (keep / "witness.json").write_bytes(witness)
    code, out, _ = jk(capsys, "verify", "--all", "--keep", str(keep))
    assert code == 1
    assert f"the witness saw 6 log entries, but the log holds only {6 - entries}" in out


def test_a_rewritten_log_fails_the_consistency_proof(
    keep: Path, made: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # Another keep's history under this keep's identity: the same origin and key, a log of
    # the same length, other entries (a rewrite that signs correctly with the stolen key).
    other = tmp_path / "other"
    shutil.copytree(made, other)
    _roll_back(other, 6)
    with Keeper.open(other, create=False) as keeper:
        for angle in range(6):
            keeper.run(circuit_text(5.0 + angle), shots=8)
    shutil.copy(other / "archive.db", keep / "archive.db")
    code, out, _ = jk(capsys, "verify", "--all", "--keep", str(keep))
    assert code == 1 and "the log does not extend the witness (size 6)" in out


def test_an_emptied_archive_is_never_started_afresh(
    keep: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    (keep / "archive.db").write_bytes(b"")  # truncate -s 0
    for args in (["verify", "--all"], ["jobs"], ["submit", "x.qasm"], ["init"]):
        code, _, err = jk(capsys, *args, "--keep", str(keep))
        assert code == 3, args
        assert "is an empty file (0 bytes)" in err and "Traceback" not in err
    assert (keep / "archive.db").stat().st_size == 0


def test_a_deleted_archive_is_not_replaced_while_the_witness_remembers_it(
    keep: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    (keep / "archive.db").unlink()
    for args in (["init"], ["submit", "x.qasm"], ["verify", "--all"]):
        assert jk(capsys, *args, "--keep", str(keep))[0] == 3, args
    assert "witness saw a log of 6 entries" in jk(capsys, "init", "--keep", str(keep))[2]
    assert not (keep / "archive.db").exists()


@pytest.mark.parametrize("cut", [100, 4096, 8192])
def test_a_truncated_or_foreign_archive_cannot_be_opened(
    keep: Path, capsys: pytest.CaptureFixture[str], cut: int
) -> None:
    path = keep / "archive.db"
    path.write_bytes(path.read_bytes()[:cut] if cut != 100 else b"not a database" * 100)
    code, out, err = jk(capsys, "verify", "--all", "--keep", str(keep))
    # SQLite finds its pages missing (or no database at all): the store cannot open it.
    assert code == 3 and "Traceback" not in err, (code, out, err)
    assert "cannot open the archive" in err


def test_a_keep_without_a_witness_gets_one_at_its_first_verify(
    keep: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    (keep / "witness.json").unlink()
    code, _, err = jk(capsys, "verify", "--all", "--keep", str(keep))
    assert code == 0 and "this keep had no witness of its log: one is written now" in err
    assert json.loads((keep / "witness.json").read_text())["size"] == 6
    code, _, err = jk(capsys, "verify", "--all", "--keep", str(keep))
    assert code == 0 and "no witness" not in err


def test_a_damaged_witness_is_a_problem(keep: Path, capsys: pytest.CaptureFixture[str]) -> None:
    (keep / "witness.json").write_text("{")
    code, out, _ = jk(capsys, "verify", "--all", "--keep", str(keep))
    assert code == 1 and "witness" in out


def test_verify_since_a_bundle_held_elsewhere(
    keep: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    older = tmp_path / "older"
    shutil.copytree(keep, older)  # the keep as it was, witness and all
    bundle = tmp_path / "held-elsewhere.json"
    with Keeper.open(keep, create=False) as keeper:
        keeper.run(circuit_text(4.0), shots=16)
        job = keeper.jobs(state="done")[-1].id
    assert jk(capsys, "bundle", job, "--keep", str(keep), "-o", str(bundle))[0] == 0
    assert jk(capsys, "verify", "--since", str(bundle), "--keep", str(keep))[0] == 0
    # Both the database and the witness restored from before the bundle: only the bundle
    # held elsewhere shows that the log lost an entry.
    assert jk(capsys, "verify", "--all", "--keep", str(older))[0] == 0
    code, out, _ = jk(capsys, "verify", "--all", "--since", str(bundle), "--keep", str(older))
    assert code == 1
    assert f"the checkpoint in {bundle} saw 7 log entries, but the log holds only 6" in out
    # A checkpoint note kept as plain text, or the witness copied away, serve the same way.
    with Keeper.open(keep, create=False) as keeper:
        note = keeper.store.checkpoints()[-1].note
    (tmp_path / "checkpoint.txt").write_text(note)
    shutil.copy(keep / "witness.json", tmp_path / "witness-copy.json")
    for held in ("checkpoint.txt", "witness-copy.json"):
        code, out, _ = jk(capsys, "verify", "--since", str(tmp_path / held), "--keep", str(older))
        assert code == 1 and "saw 7 log entries, but the log holds only 6" in out
    # A missing file is a usage error.
    code, _, err = jk(capsys, "verify", "--since", str(tmp_path / "nope"), "--keep", str(keep))
    assert code == 2 and "no such file" in err


def test_zeroed_leaf_hashes_and_log_state_are_reported(
    keep: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    _sql(keep, "UPDATE log_entries SET leaf_hash = zeroblob(32) WHERE idx = 2")
    code, out, _ = jk(capsys, "verify", "--all", "--keep", str(keep))
    assert code == 1 and "log index 2: its stored leaf hash is not the hash" in out
    _sql(keep, "UPDATE log_entries SET leaf_hash = (SELECT leaf_hash FROM log_entries "
               "WHERE idx = 3) WHERE idx = 2",
         "UPDATE log_state SET state = zeroblob(length(state))")  # fmt: skip
    code, out, _ = jk(capsys, "verify", "--all", "--keep", str(keep))
    assert code == 1 and "the saved log state (size 6) is not the one the 6 entries give" in out


def test_a_removed_checkpoint_between_others_is_reported(
    keep: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    _sql(keep, "DELETE FROM checkpoints WHERE size = 4")
    code, out, _ = jk(capsys, "verify", "--all", "--keep", str(keep))
    assert code == 1
    assert "follows the checkpoint of size 4, but the one before it has size 2" in out
    _sql(keep, "DELETE FROM checkpoints WHERE size = 6")
    code, out, _ = jk(capsys, "verify", "--all", "--keep", str(keep))
    assert code == 1 and "entries 2..5 are covered by no signed checkpoint" in out
