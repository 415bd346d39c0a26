"""C2SP signed notes and tlog checkpoints (v1.0.0)."""

from __future__ import annotations

import base64
import hashlib
import json
from pathlib import Path
from typing import Any

import pytest
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from hypothesis import given, settings
from hypothesis import strategies as st

from jobkeeper.exceptions import ProvenanceError, VerificationError
from jobkeeper.provenance import (
    Checkpoint,
    format_checkpoint,
    note_key_id,
    parse_checkpoint,
    parse_verifier_key,
    public_key_bytes,
    sign_checkpoint,
    sign_note,
    verifier_key_string,
    verify_checkpoint,
    verify_note,
)
from jobkeeper.provenance.checkpoint import split_note


def _examples(vectors_dir: Path) -> dict[str, Any]:
    data: dict[str, Any] = json.loads(
        (vectors_dir / "signed-note" / "c2sp-v1.0.0-examples.json").read_text(encoding="utf-8")
    )
    return data


def test_published_note_verifies_with_published_key(vectors_dir: Path) -> None:
    # Source: C2SP signed-note v1.0.0, "Verifier keys" example (published note and vkey).
    ex = _examples(vectors_dir)["verifiable"][0]
    assert verify_note(ex["note"], [ex["vkey"]]) == ex["note_text"]
    verifier = parse_verifier_key(ex["vkey"])
    assert verifier.name == ex["key_name"]
    # Our key ID computation: SHA-256(name ‖ 0x0A ‖ 0x01 ‖ key)[:4] = 530d903a.
    pub = bytes.fromhex(ex["public_key_hex"])
    assert note_key_id(ex["key_name"], pub).hex() == ex["key_id"] == "530d903a"
    assert verifier_key_string(ex["key_name"], pub) == ex["vkey"]


def test_published_note_rejected_when_text_changes(vectors_dir: Path) -> None:
    # Derived from the published example (SOURCES.md §3 negative checks).
    ex = _examples(vectors_dir)["verifiable"][0]
    note = ex["note"]
    for i in range(len(ex["note_text"]) - 1):
        changed = note[:i] + chr(ord(note[i]) ^ 1) + note[i + 1 :]
        with pytest.raises(VerificationError):
            verify_note(changed, [ex["vkey"]])


def test_parse_only_examples_split_and_are_rejected(vectors_dir: Path) -> None:
    # Source: C2SP signed-note and tlog-checkpoint v1.0.0 opening examples (published,
    # no verifier keys): split at the last blank line; unknown keys never verify.
    ex = _examples(vectors_dir)
    vkey = ex["verifiable"][0]["vkey"]
    for item in ex["parse_only"]:
        text, sigs = split_note(item["note"])
        assert text == item["note_text"]
        assert [(n, k.hex()) for n, k, _ in sigs] == [
            (s["key_name"], s["key_id"]) for s in item["signatures"]
        ]
        with pytest.raises(VerificationError, match="no valid signature"):
            verify_note(item["note"], [vkey])
        if "checkpoint" in item:
            cp = parse_checkpoint(text)
            want = item["checkpoint"]
            assert cp == Checkpoint(
                want["origin"],
                want["tree_size"],
                base64.b64decode(want["root_hash_base64"]),
                tuple(want["extension_lines"]),
            )


# A fixed seed keeps hypothesis examples reproducible across runs.
KEY = Ed25519PrivateKey.from_private_bytes(hashlib.sha256(b"checkpoint test key").digest())
PUB = public_key_bytes(KEY)
ORIGIN = "jobkeeper.test/keep-0001"
NOTE = sign_checkpoint(ORIGIN, 42, bytes(range(32)), KEY)


def test_sign_and_verify_checkpoint_round_trip() -> None:
    cp = verify_checkpoint(NOTE, [PUB], origin=ORIGIN)
    assert cp == Checkpoint(ORIGIN, 42, bytes(range(32)))
    assert NOTE.startswith(format_checkpoint(ORIGIN, 42, bytes(range(32))) + "\n\u2014 ")
    with pytest.raises(VerificationError, match="not the expected"):
        verify_checkpoint(NOTE, [PUB], origin="jobkeeper.test/other")
    with pytest.raises(VerificationError):
        verify_checkpoint(NOTE, [public_key_bytes(Ed25519PrivateKey.generate())])


def test_known_key_with_bad_signature_rejects_unknown_is_ignored() -> None:
    text = "hello\n"
    note = sign_note(text, "a.example/k", KEY)
    other = Ed25519PrivateKey.generate()
    both = note + sign_note(text, "b.example/k", other).split("\n\n", 1)[1]
    assert verify_note(both, [verifier_key_string("a.example/k", PUB)]) == text
    # Same name and key ID as the known key, but a wrong signature: reject.
    line = note.split("\n\n", 1)[1]
    blob = bytearray(base64.b64decode(line.split(" ")[2]))
    blob[10] ^= 1
    bad = text + "\n\u2014 a.example/k " + base64.b64encode(bytes(blob)).decode() + "\n"
    with pytest.raises(VerificationError, match="does not verify"):
        verify_note(bad + line, [verifier_key_string("a.example/k", PUB)])


def test_malformed_inputs() -> None:
    with pytest.raises(VerificationError):
        parse_verifier_key("a.example/k+00000000+" + base64.b64encode(b"\x01" + PUB).decode())
    with pytest.raises(VerificationError, match="leading zeros"):
        parse_checkpoint(f"{ORIGIN}\n042\n{base64.b64encode(bytes(32)).decode()}\n")
    with pytest.raises(VerificationError, match="32"):
        parse_checkpoint(f"{ORIGIN}\n42\n{base64.b64encode(bytes(31)).decode()}\n")
    with pytest.raises(ProvenanceError):
        format_checkpoint("DSSEv1 evil", 1, bytes(32))
    with pytest.raises(ProvenanceError):
        sign_note("no newline", "a.example/k", KEY)


@settings(max_examples=300, deadline=None)
@given(st.integers(0, len(NOTE.encode()) - 1), st.integers(1, 255))
def test_any_single_byte_change_to_a_checkpoint_is_detected(pos: int, delta: int) -> None:
    # Property (no outside source): a signed checkpoint is byte-exact; every one-byte
    # change is rejected (bad UTF-8, parse error, or signature failure).
    raw = bytearray(NOTE.encode())
    raw[pos] = (raw[pos] + delta) % 256
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        return  # cannot even be read as a note
    with pytest.raises(VerificationError):
        verify_checkpoint(text, [PUB], origin=ORIGIN)
