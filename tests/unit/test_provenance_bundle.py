"""Audit bundles: written, read back and verified offline; tampering is found.

Expected outcomes follow shared/notes/provenance-standards.md §7 test 16 (derived from
DSSE, RFC 9162 and C2SP rules; no published bundle vectors exist for our own format).
"""

from __future__ import annotations

import base64
import copy
import hashlib
import json
from dataclasses import replace
from pathlib import Path

import pytest
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from hypothesis import given, settings
from hypothesis import strategies as st

from jobkeeper.exceptions import ProvenanceError, VerificationError
from jobkeeper.provenance import (
    BUNDLE_FORMAT,
    Bundle,
    MerkleTree,
    fingerprint,
    make_bundle,
    public_key_bytes,
    read_bundle,
    seal_run,
    sign_checkpoint,
    verify_bundle,
    write_bundle,
)

ORIGIN = "jobkeeper.test/keep-bundle"
TWO_BITS = {"canonicalText": 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c0[2];\n'}
# A fixed seed keeps hypothesis examples reproducible across runs.
KEY = Ed25519PrivateKey.from_private_bytes(hashlib.sha256(b"bundle test key").digest())
FP = fingerprint(KEY)
KEYS = {FP: public_key_bytes(KEY)}


def _log(
    n: int, key: Ed25519PrivateKey = KEY, tag: str = "job"
) -> tuple[MerkleTree, dict[int, bytes]]:
    tree, stored = MerkleTree(), {}
    for i in range(n):
        counts = {"00": i, "11": 7}
        predicate = {"jobKey": f"{tag}-{i}", "counts": counts, "circuit": TWO_BITS,
                     "registers": [{"name": "c", "width": 2}]}  # fmt: skip
        sealed = seal_run(counts, predicate, key)
        stored[i] = sealed.envelope_bytes
        tree.append(sealed.leaf_hash)
    return tree, stored


TREE, STORED = _log(10)
NOTE = sign_checkpoint(ORIGIN, 10, TREE.root(), KEY)
BUNDLE = make_bundle(TREE, {i: STORED[i] for i in (0, 3, 9)}, KEYS, NOTE)


def test_round_trip_through_a_file(tmp_path: Path) -> None:
    path = tmp_path / "audit.json"
    write_bundle(path, BUNDLE)
    data = json.loads(path.read_text(encoding="utf-8"))
    assert data["format"] == BUNDLE_FORMAT and list(data)[:2] == ["format", "readme"]
    assert any("fingerprint" in line for line in data["readme"])
    assert "PRIVATE" not in path.read_text()  # no secret ever enters a bundle
    back = read_bundle(path)
    assert back == BUNDLE
    report = verify_bundle(back, {FP})
    assert report.ok and report.checked == 3 and report.warnings == []


def test_without_trusted_keys_the_result_is_marked_self_asserted() -> None:
    report = verify_bundle(BUNDLE)
    assert report.ok
    assert "self-consistent" in report.warnings[0] and FP in report.warnings[0]


def test_swapped_key_fails_under_trusted_fingerprints() -> None:
    # The attacker re-signs everything with their own key and puts it in the bundle.
    mallory = Ed25519PrivateKey.generate()
    tree, stored = _log(10, mallory)
    note = sign_checkpoint(ORIGIN, 10, tree.root(), mallory)
    forged = make_bundle(
        tree,
        {i: stored[i] for i in (0, 3, 9)},
        {fingerprint(mallory): public_key_bytes(mallory)},
        note,
    )
    assert verify_bundle(forged).ok  # self-consistent, hence the warning above
    report = verify_bundle(forged, {FP})
    assert not report.ok
    assert "none of the bundle's keys is among the trusted" in report.problems[0]
    assert "checkpoint" in report.problems[1]
    assert len(report.problems) == 2 + 3  # every entry's signature is listed too
    # Same key bytes under our fingerprint label: fingerprints are recomputed.
    relabelled = replace(forged, keys={FP: public_key_bytes(mallory)})
    assert not verify_bundle(relabelled, {FP}).ok


def test_every_problem_is_listed() -> None:
    data = BUNDLE.to_json()
    entries = data["entries"]
    # Entry 0: payload altered; entry 1: claims another index; entry 2: proof bit flipped.
    entries[0]["envelope"]["payload"] = base64.b64encode(b"{}").decode()
    entries[1]["index"] = 4
    proof0 = bytearray(base64.b64decode(entries[2]["inclusionProof"][0]))
    proof0[0] ^= 1
    entries[2]["inclusionProof"][0] = base64.b64encode(bytes(proof0)).decode()
    report = verify_bundle(Bundle.from_json(data), {FP})
    labels = sorted({p.split(":")[0] for p in report.problems})
    assert labels == ["entry 0 (log index 0)", "entry 1 (log index 4)", "entry 2 (log index 9)"]
    assert any("no valid signature" in p for p in report.problems)
    assert sum("not in the checkpointed log" in p for p in report.problems) == 3


def test_dropped_replayed_and_foreign_entries() -> None:
    # Replayed: the same entry twice. Foreign: an entry from another keep's log.
    data = BUNDLE.to_json()
    data["entries"].append(copy.deepcopy(data["entries"][1]))
    # The other keep is signed with the same key: only the log proof can tell.
    other_tree, other_stored = _log(10, tag="other-keep")
    other_note = sign_checkpoint(ORIGIN, 10, other_tree.root(), KEY)
    foreign = make_bundle(other_tree, {5: other_stored[5]}, KEYS, other_note)
    data["entries"].append(foreign.to_json()["entries"][0])
    report = verify_bundle(Bundle.from_json(data), {FP})
    assert any("appears twice" in p for p in report.problems)
    assert report.problems[-1].startswith("entry 4 (log index 5): not in the checkpointed log")
    # Dropped: a bundle holding fewer entries still verifies (it is a selection); what a
    # bundle cannot hide is a change to the log, which the proofs above catch.
    assert verify_bundle(replace(BUNDLE, entries=BUNDLE.entries[1:]), {FP}).ok


def test_checkpoint_tampering_and_origin() -> None:
    bad_note = NOTE.replace("\n10\n", "\n11\n", 1)
    report = verify_bundle(replace(BUNDLE, checkpoint=bad_note), {FP})
    assert report.problems[0].startswith("checkpoint:")
    report = verify_bundle(BUNDLE, {FP}, origin="jobkeeper.test/another")
    assert "not the expected" in report.problems[0]


def test_malformed_files_and_bad_inputs(tmp_path: Path) -> None:
    path = tmp_path / "x.json"
    path.write_text('{"format": "something else"}')
    with pytest.raises(VerificationError, match="not a"):
        read_bundle(path)
    with pytest.raises(ProvenanceError):
        read_bundle(tmp_path / "absent.json")
    with pytest.raises(ProvenanceError, match="not the logged one"):
        make_bundle(TREE, {1: STORED[2]}, KEYS, NOTE)
    with pytest.raises(ProvenanceError, match="not covered"):
        make_bundle(TREE, {9: STORED[9]}, KEYS, sign_checkpoint(ORIGIN, 5, TREE.root(5), KEY))


BUNDLE_TEXT = json.dumps(BUNDLE.to_json(), indent=1).encode()


@settings(max_examples=200, deadline=None)
@given(st.integers(0, len(BUNDLE_TEXT) - 1), st.integers(1, 255))
def test_single_byte_changes_to_a_bundle_file(pos: int, delta: int) -> None:
    # Property (no outside source): a one-byte change never crashes the reader or the
    # verifier, and is either reported or leaves every verified field unchanged (it hit
    # the readme or the JSON layout).
    raw = bytearray(BUNDLE_TEXT)
    raw[pos] = (raw[pos] + delta) % 256
    try:
        bundle = Bundle.from_json(json.loads(raw))
    except (ValueError, VerificationError):
        return  # unreadable as a bundle: rejected
    report = verify_bundle(bundle, {FP})
    if report.ok:
        assert (bundle.keys, bundle.checkpoint, bundle.entries, bundle.origin) == (
            BUNDLE.keys,
            BUNDLE.checkpoint,
            BUNDLE.entries,
            BUNDLE.origin,
        )


def test_hand_made_envelope_outside_i_json_is_reported_not_raised() -> None:
    data = BUNDLE.to_json()
    data["entries"][0]["envelope"]["extra"] = 2**60
    report = verify_bundle(Bundle.from_json(data), {FP})
    assert any("cannot be canonicalised" in p for p in report.problems)
