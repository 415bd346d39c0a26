"""Tampering with a real archive is detected by ``verify``.

Published principles, not values: DSSE signatures cover the exact payload bytes (DSSE
protocol v1); a Merkle log with signed checkpoints makes deleting, reordering,
duplicating or rewriting entries detectable (RFC 9162 §2.1, C2SP tlog-checkpoint). The
archive here is a real SQLite file written by the real worker; the tampering is done with
plain SQL, as someone with write access to the file would."""

from __future__ import annotations

import base64
import json
import random
import sqlite3
from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.cli import main
from jobkeeper.hashing import canonical_json
from jobkeeper.provenance.dsse import PAYLOAD_TYPE, envelope_bytes, sign_envelope
from tests.integration.helpers import circuit_text

JOBS = 12


@pytest.fixture(scope="module")
def archive(tmp_path_factory: pytest.TempPathFactory) -> Path:
    keep = tmp_path_factory.mktemp("tamper") / "keep"
    with Keeper.open(keep) as keeper:
        for batch in range(3):  # three finishing transactions: three checkpoints at least
            keeper.run_many([circuit_text(0.1 * (4 * batch + i)) for i in range(4)], shots=64)
        assert keeper.verify().ok
    return keep


def _verify(keep: Path) -> list[str]:
    with Keeper.open(keep, create=False) as keeper:
        return keeper.verify().problems


def _targets(conn: sqlite3.Connection) -> list[tuple[str, str, str, object]]:
    """(table, key column, value column, key) of every byte-bearing cell under test."""
    cells: list[tuple[str, str, str, object]] = []
    for (idx,) in conn.execute("SELECT idx FROM log_entries"):
        cells.append(("log_entries", "idx", "envelope", idx))
    for (job_id,) in conn.execute("SELECT job_id FROM results"):
        cells.append(("results", "job_id", "counts", job_id))
    for (size,) in conn.execute("SELECT size FROM checkpoints"):
        cells.append(("checkpoints", "size", "note", size))
    return cells


@pytest.mark.slow
def test_a_thousand_random_single_byte_changes_are_all_detected(archive: Path) -> None:
    rng = random.Random(4)
    conn = sqlite3.connect(archive / "archive.db", isolation_level=None)
    cells = _targets(conn)
    missed = []
    for trial in range(1000):
        table, key_col, col, key = cells[trial % len(cells)]
        (original,) = conn.execute(
            f"SELECT {col} FROM {table} WHERE {key_col} = ?", (key,)
        ).fetchone()
        data = bytearray(original if isinstance(original, bytes) else original.encode())
        pos = rng.randrange(len(data))
        data[pos] = (data[pos] + rng.randrange(1, 256)) % 256
        changed = (
            bytes(data) if isinstance(original, bytes) else bytes(data).decode("utf-8", "replace")
        )
        if changed == original:
            continue
        conn.execute(f"UPDATE {table} SET {col} = ? WHERE {key_col} = ?", (changed, key))
        try:
            if not _verify(archive):
                missed.append((table, key, pos))
        finally:
            conn.execute(f"UPDATE {table} SET {col} = ? WHERE {key_col} = ?", (original, key))
    conn.close()
    assert not missed, missed[:5]
    assert _verify(archive) == []


def _swap_rows(conn: sqlite3.Connection, a: int, b: int) -> None:
    rows = {i: conn.execute("SELECT job_id, envelope, leaf_hash, signer FROM log_entries "
                            "WHERE idx = ?", (i,)).fetchone() for i in (a, b)}  # fmt: skip
    conn.execute("DELETE FROM log_entries WHERE idx IN (?, ?)", (a, b))
    for i, other in ((a, b), (b, a)):
        conn.execute("INSERT INTO log_entries (idx, job_id, envelope, leaf_hash, signer, created_at) "
                     "VALUES (?, ?, ?, ?, ?, 0)", (i, *rows[other]))  # fmt: skip


@pytest.mark.parametrize("damage", ["delete", "reorder", "duplicate", "re-sign", "rekey"])
def test_rewriting_the_log_is_caught(archive: Path, tmp_path: Path, damage: str) -> None:
    copy = tmp_path / "keep"
    copy.mkdir()
    for name in ("archive.db", "config.toml"):
        (copy / name).write_bytes((archive / name).read_bytes())
    (copy / "keys").symlink_to(archive / "keys")
    conn = sqlite3.connect(copy / "archive.db", isolation_level=None)
    conn.execute("PRAGMA foreign_keys=OFF")
    if damage == "delete":
        conn.execute("DELETE FROM log_entries WHERE idx = 3")
    elif damage == "reorder":
        _swap_rows(conn, 2, 5)
    elif damage == "rekey":
        # The job row is made to claim another job key than the one its manifest attests.
        conn.execute("UPDATE jobs SET job_key = 'sha256:' || hex(randomblob(32)) "
                     "WHERE id = (SELECT job_id FROM log_entries WHERE idx = 2)")  # fmt: skip
    elif damage == "duplicate":
        row = conn.execute("SELECT job_id, envelope, leaf_hash, signer FROM log_entries "
                           "WHERE idx = 1").fetchone()  # fmt: skip
        conn.execute("INSERT INTO log_entries (idx, job_id, envelope, leaf_hash, signer, created_at) "
                     "VALUES (?, ?, ?, ?, ?, 0)", (JOBS, "f" * 32, *row[1:]))  # fmt: skip
    else:
        # An insider with the signing key rewrites one result and signs it again: the
        # signature holds, but the checkpoints signed earlier no longer match the log.
        with Keeper.open(copy) as keeper:
            key = keeper.keyring.load_active()
        (job_id, stored) = conn.execute(
            "SELECT job_id, envelope FROM log_entries WHERE idx = 4"
        ).fetchone()
        envelope = json.loads(stored)
        statement = json.loads(base64.b64decode(envelope["payload"]))
        counts = {"00": statement["predicate"]["shots"]}
        statement["predicate"]["counts"] = counts
        statement["subject"][0]["digest"]["sha256"] = __import__("hashlib").sha256(
            canonical_json(counts)).hexdigest()  # fmt: skip
        forged = envelope_bytes(sign_envelope(canonical_json(statement), PAYLOAD_TYPE, key))
        conn.execute("UPDATE log_entries SET envelope = ? WHERE idx = 4", (forged,))
        conn.execute("UPDATE results SET counts = ? WHERE job_id = ?",
                     (canonical_json(counts).decode(), job_id))  # fmt: skip
    conn.close()
    problems = _verify(copy)
    assert problems, f"{damage} went unnoticed"
    if damage == "re-sign":
        assert any("checkpoint" in p for p in problems), problems


def test_a_bundle_with_a_swapped_key_fails_under_key(
    archive: Path, tmp_path: Path, capsys, monkeypatch: pytest.MonkeyPatch
) -> None:
    bundle = tmp_path / "b.json"
    monkeypatch.chdir(tmp_path)  # no keep at hand here
    monkeypatch.delenv("JOBKEEPER_KEEP", raising=False)
    with Keeper.open(archive, create=False) as keeper:
        fingerprint = keeper.keyring.active_record().fingerprint
        ids = [j.id for j in keeper.jobs()[:3]]
    assert main(["bundle", *ids, "--keep", str(archive), "-o", str(bundle)]) == 0
    assert main(["verify", str(bundle), "--key", fingerprint]) == 0
    assert main(["verify", str(bundle), "--keep", str(archive)]) == 0  # the keep trusts it
    capsys.readouterr()
    # No keep and no --key: the keys inside the bundle prove nothing, so no trusted signer.
    assert main(["verify", str(bundle)]) == 1
    assert "no keep at hand and no --key" in capsys.readouterr().err
    # Swap in an attacker's key, re-sign everything with it: self-consistent, but not ours.
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    from jobkeeper.provenance import fingerprint as fp_of
    from jobkeeper.provenance import public_key_bytes

    data = json.loads(bundle.read_text())
    evil = Ed25519PrivateKey.generate()
    data["keys"] = {fp_of(evil): base64.b64encode(public_key_bytes(evil)).decode()}
    for entry in data["entries"]:
        payload = base64.b64decode(entry["envelope"]["payload"])
        entry["envelope"] = sign_envelope(payload, PAYLOAD_TYPE, evil)
    bundle.write_text(json.dumps(data))
    capsys.readouterr()
    assert main(["verify", str(bundle), "--key", fingerprint, "--json"]) == 1
    report = json.loads(capsys.readouterr().out)
    assert report["ok"] is False and report["problems"]
