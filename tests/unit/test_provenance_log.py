"""Whole-log verification: signatures, checkpoints, roots, consistency (tamper tests).

The tamper cases follow shared/notes/provenance-standards.md §7 (tests 10–13); their
expected outcomes are derived from RFC 9162 and C2SP tlog-checkpoint, not published data.
"""

from __future__ import annotations

import base64
import hashlib
import json
from dataclasses import replace

import pytest
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from hypothesis import given, settings
from hypothesis import strategies as st

from jobkeeper.provenance import (
    PAYLOAD_TYPE,
    LogEntry,
    MerkleTree,
    build_statement,
    envelope_bytes,
    fingerprint,
    public_key_bytes,
    seal_run,
    sign_checkpoint,
    sign_envelope,
    statement_bytes,
    verify_log,
)

ORIGIN = "jobkeeper.test/keep-log"
ONE_BIT = {"canonicalText": 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[1];\ncreg c0[1];\n'}
# A fixed seed keeps hypothesis examples reproducible across runs.
KEY = Ed25519PrivateKey.from_private_bytes(hashlib.sha256(b"log test key").digest())
KEYS = {fingerprint(KEY): public_key_bytes(KEY)}


def _predicate(i: int, counts: dict[str, int]) -> dict[str, object]:
    # A minimal predicate (with the circuit and register layout that the counts' keys
    # must fit); the full schema is exercised in test_provenance_manifest.
    return {"jobKey": f"sha256:{i:064x}", "circuit": ONE_BIT, "counts": counts,
            "registers": [{"name": "c", "width": 1}]}  # fmt: skip


def make_log(
    n: int, every: int, key: Ed25519PrivateKey = KEY
) -> tuple[list[LogEntry], list[str], MerkleTree]:
    entries, notes, tree = [], [], MerkleTree()
    for i in range(n):
        counts = {"0": i, "1": 100 - i % 100}
        sealed = seal_run(counts, _predicate(i, counts), key)
        entries.append(LogEntry(sealed.envelope_bytes, sealed.signer, counts))
        tree.append(sealed.leaf_hash)
        if tree.size % every == 0:
            notes.append(sign_checkpoint(ORIGIN, tree.size, tree.root(), key))
    return entries, notes, tree


ENTRIES, NOTES, TREE = make_log(12, 4)


def test_clean_log_verifies() -> None:
    report = verify_log(ENTRIES, NOTES, KEYS, origin=ORIGIN)
    assert report.ok, report.problems
    assert report.checked == 12 and report.warnings == []
    # Each append commits its checkpoint: entries no checkpoint covers are a finding.
    report = verify_log(ENTRIES + make_log(1, 100)[0][:0], NOTES[:2], KEYS)
    assert report.problems == [
        "entries 8..11 are covered by no signed checkpoint: a checkpoint was removed or "
        "entries were added"
    ]


def test_entry_rewritten_and_resigned_with_the_right_key_is_caught() -> None:
    # Signatures alone cannot catch this (the attacker holds the key): the roots do.
    counts = {"0": 999, "1": 1}
    forged = seal_run(counts, _predicate(5, counts), KEY)
    entries = list(ENTRIES)
    entries[5] = LogEntry(forged.envelope_bytes, forged.signer, counts)
    report = verify_log(entries, NOTES, KEYS)
    assert not report.ok
    assert all(p.startswith("checkpoint") for p in report.problems)
    assert len(report.problems) == 2  # checkpoints of size 8 and 12 both cover entry 5
    assert "4..7" in report.problems[0]  # the checkpoint of size 4 still matches


@pytest.mark.parametrize(
    "mutate",
    [
        pytest.param(lambda e: e[:3] + e[4:], id="delete"),
        pytest.param(lambda e: [*e[:3], e[4], e[3], *e[5:]], id="swap"),
        pytest.param(lambda e: [*e[:3], e[3], *e[3:]], id="duplicate"),
        pytest.param(lambda e: e[:10], id="truncate-below-checkpoint"),
    ],
)
def test_deleting_reordering_duplicating_is_detected(mutate: object) -> None:
    entries = mutate(list(ENTRIES))  # type: ignore[operator]
    report = verify_log(entries, NOTES, KEYS)
    assert not report.ok
    assert any(p.startswith("checkpoint") for p in report.problems), report.problems


def test_counts_edit_and_wrong_signer_are_reported() -> None:
    entries = list(ENTRIES)
    entries[2] = replace(entries[2], counts={"0": 3, "1": 98})
    other = Ed25519PrivateKey.generate()
    keys = {**KEYS, fingerprint(other): public_key_bytes(other)}
    entries[7] = replace(entries[7], signer=fingerprint(other))
    report = verify_log(entries, NOTES, keys)
    assert len(report.problems) == 2, report.problems
    assert "entry 2: counts digest mismatch" in report.problems[0]
    assert "entry 7: recorded signer" in report.problems[1]


def test_unknown_key_and_bad_signature_are_listed_all() -> None:
    entries = list(ENTRIES)
    for i in (1, 6, 11):
        env = json.loads(entries[i].envelope)
        sig = bytearray(base64.b64decode(env["signatures"][0]["sig"]))
        sig[0] ^= 1
        env["signatures"][0]["sig"] = base64.b64encode(bytes(sig)).decode()
        entries[i] = replace(entries[i], envelope=json.dumps(env).encode())
    report = verify_log(entries, NOTES, KEYS)
    bad_entries = [p for p in report.problems if p.startswith("entry")]
    assert [p.split(":")[0] for p in bad_entries] == ["entry 1", "entry 6", "entry 11"]
    assert sum(p.startswith("checkpoint") for p in report.problems) == 3


def test_rollback_fork_and_foreign_checkpoints() -> None:
    # Size regression (standards note §7 test 11).
    report = verify_log(ENTRIES, [NOTES[2], NOTES[1]], KEYS)
    assert any("went back" in p for p in report.problems)
    # Two roots signed for one size: equivocation (test 12).
    fork = sign_checkpoint(ORIGIN, 8, bytes(32), KEY)
    report = verify_log(ENTRIES, [NOTES[1], fork], KEYS)
    assert any("two different roots" in p for p in report.problems)
    # Checkpoint signed by a key the log does not list, or of another origin (test 13).
    stranger = Ed25519PrivateKey.generate()
    alien = sign_checkpoint(ORIGIN, 12, TREE.root(), stranger)
    report = verify_log(ENTRIES, [*NOTES, alien], KEYS)
    assert report.problems == ["checkpoint 3: note has no valid signature by a known key"]
    other_origin = sign_checkpoint("jobkeeper.test/elsewhere", 12, TREE.root(), KEY)
    report = verify_log(ENTRIES, [*NOTES, other_origin], KEYS)
    assert "not the expected" in report.problems[0]
    # Checkpoint beyond the log: entries were removed from the end.
    report = verify_log(ENTRIES[:11], NOTES, KEYS)
    assert any("holds only 11" in p for p in report.problems)


def test_key_listed_under_a_wrong_fingerprint_is_a_problem() -> None:
    report = verify_log(ENTRIES, NOTES, {"00" * 32: public_key_bytes(KEY)})
    assert report.problems[0].startswith("public key 0000")


def test_rotated_keys_verify_old_and_new_entries() -> None:
    new_key = Ed25519PrivateKey.generate()
    entries, notes, tree = list(ENTRIES), list(NOTES), MerkleTree(TREE.levels[0])
    for i in range(12, 16):
        counts = {"0": i}
        sealed = seal_run(counts, _predicate(i, counts), new_key)
        entries.append(LogEntry(sealed.envelope_bytes, sealed.signer, counts))
        tree.append(sealed.leaf_hash)
    notes.append(sign_checkpoint(ORIGIN, 16, tree.root(), new_key))
    keys = {**KEYS, fingerprint(new_key): public_key_bytes(new_key)}
    assert verify_log(entries, notes, keys).ok
    assert not verify_log(entries, notes, KEYS).ok  # without the new key


SMALL, SMALL_NOTES, _ = make_log(5, 5)


@settings(max_examples=200, deadline=None)
@given(st.integers(0, 4), st.data())
def test_any_single_byte_change_to_a_stored_envelope_is_detected(
    i: int, data: st.DataObject
) -> None:
    # Property (no outside source): with a checkpoint over the log, every one-byte change
    # of a stored envelope is a problem, even in the unsigned keyid (the leaf changes).
    raw = bytearray(SMALL[i].envelope)
    pos = data.draw(st.integers(0, len(raw) - 1))
    raw[pos] = (raw[pos] + data.draw(st.integers(1, 255))) % 256
    entries = list(SMALL)
    entries[i] = replace(entries[i], envelope=bytes(raw))
    assert not verify_log(entries, SMALL_NOTES, KEYS).ok


def test_without_stored_counts_the_predicate_counts_are_checked() -> None:
    entries = [replace(e, counts=None) for e in ENTRIES]
    assert verify_log(entries, NOTES, KEYS).ok
    # A statement whose subject disagrees with its own predicate counts is reported.
    statement = build_statement({"0": 1}, {"jobKey": "x"})
    statement["predicate"]["counts"] = {"0": 2}
    env = envelope_bytes(sign_envelope(statement_bytes(statement), PAYLOAD_TYPE, KEY))
    report = verify_log([LogEntry(env, fingerprint(KEY))], [], KEYS)
    assert len(report.problems) == 2 and "counts digest mismatch" in report.problems[0]
    assert "no valid signed checkpoint" in report.problems[1]
