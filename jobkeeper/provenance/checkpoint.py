"""Signed checkpoints: C2SP tlog-checkpoint v1.0.0 inside a C2SP signed-note v1.0.0.

A note is UTF-8 text ending in a newline, a blank line, then signature lines
``— <key name> <base64(4-byte key ID ‖ signature)>`` (U+2014 EM DASH). Ed25519 keys
have key ID = SHA-256(name ‖ 0x0A ‖ 0x01 ‖ public key)[:4]. A checkpoint's text is
``<origin>\\n<size>\\n<base64 root>\\n`` plus optional extension lines.

We sign checkpoints with key name = origin, so a verifier needs only the origin and the
keep's public keys. One Ed25519 key may sign both envelopes and notes without ambiguity:
signed DSSE bytes always begin ``DSSEv1 `` and we refuse that as an origin.
"""

from __future__ import annotations

import base64
import binascii
import functools
import hashlib
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey, Ed25519PublicKey

from jobkeeper.exceptions import ProvenanceError, VerificationError
from jobkeeper.provenance.keys import load_public_key, public_key_bytes

SIGNATURE_PREFIX = "\u2014 "  # em dash, space
ED25519_TYPE = 0x01
MAX_SIGNATURES = 100  # the spec lets verifiers cap the number of signature lines

#: The extension line jobkeeper adds to each checkpoint: ``previous <size>``, the size of
#: the checkpoint signed before it (0 for the first), so the chain of checkpoints has no
#: silent gaps. Extension lines are free-form in C2SP tlog-checkpoint.
PREVIOUS_SIZE = "previous"

_KEY_NAME = re.compile(r"[^\s+]+")
_DECIMAL = re.compile(r"0|[1-9][0-9]*")
_B64 = re.compile(r"[A-Za-z0-9+/]+={0,2}")


def _b64(text: str, what: str) -> bytes:
    # Strict and canonical: a note is hashed as text, so two spellings of one value
    # would be two different notes.
    if not _B64.fullmatch(text):
        raise VerificationError(f"{what} is not standard base64")
    try:
        data = base64.b64decode(text, validate=True)
    except (binascii.Error, ValueError):
        raise VerificationError(f"{what} is not valid base64") from None
    if base64.b64encode(data).decode("ascii") != text:
        raise VerificationError(f"{what} is not canonical base64")
    return data


# ---------------------------------------------------------------------------------------
# Checkpoint body


@dataclass(frozen=True)
class Checkpoint:
    origin: str
    size: int
    root: bytes
    extensions: tuple[str, ...] = field(default=())

    @property
    def previous_size(self) -> int | None:
        """The size of the checkpoint before this one, when the note says it."""
        for line in self.extensions:
            name, _, value = line.partition(" ")
            if name == PREVIOUS_SIZE and _DECIMAL.fullmatch(value):
                return int(value)
        return None


def _check_origin(origin: str) -> None:
    if not origin or "\n" in origin or origin.startswith("DSSEv1"):
        raise ProvenanceError(f"unusable checkpoint origin {origin!r}")


def format_checkpoint(origin: str, size: int, root: bytes, extensions: Sequence[str] = ()) -> str:
    """The checkpoint text (what gets signed)."""
    _check_origin(origin)
    if size < 0 or len(root) != 32:
        raise ProvenanceError("a checkpoint needs a size ≥ 0 and a 32-byte root")
    for line in extensions:
        if not line or "\n" in line:
            raise ProvenanceError(f"unusable checkpoint extension line {line!r}")
    lines = [origin, str(size), base64.b64encode(root).decode("ascii"), *extensions]
    return "\n".join(lines) + "\n"


def parse_checkpoint(text: str) -> Checkpoint:
    """Parse checkpoint text (the note text, after verification). VerificationError."""
    if not text.endswith("\n"):
        raise VerificationError("checkpoint text does not end with a newline")
    lines = text[:-1].split("\n")
    if len(lines) < 3:
        raise VerificationError("checkpoint text needs origin, size and root lines")
    origin, size_text, root_text, *extensions = lines
    if not origin:
        raise VerificationError("checkpoint origin is empty")
    if not _DECIMAL.fullmatch(size_text):
        raise VerificationError(
            f"checkpoint size {size_text!r} is not a decimal without leading zeros"
        )
    root = _b64(root_text, "checkpoint root")
    if len(root) != 32:
        raise VerificationError(f"checkpoint root has {len(root)} bytes, not 32")
    if any(not line for line in extensions):
        raise VerificationError("checkpoint has an empty extension line")
    return Checkpoint(origin, int(size_text), root, tuple(extensions))


# ---------------------------------------------------------------------------------------
# Signed notes


def note_key_id(name: str, public_key: bytes) -> bytes:
    """4-byte key ID of an Ed25519 note key."""
    return hashlib.sha256(
        name.encode("utf-8") + b"\n" + bytes([ED25519_TYPE]) + public_key
    ).digest()[:4]


@dataclass(frozen=True)
class NoteVerifier:
    name: str
    key_id: bytes
    public_key: Ed25519PublicKey

    @classmethod
    def of(cls, name: str, public_key: bytes | Ed25519PublicKey) -> NoteVerifier:
        raw = public_key if isinstance(public_key, bytes) else public_key_bytes(public_key)
        if not _KEY_NAME.fullmatch(name):
            raise ProvenanceError(f"unusable note key name {name!r}")
        return cls(name, note_key_id(name, raw), load_public_key(raw))


def verifier_key_string(name: str, public_key: bytes | Ed25519PublicKey) -> str:
    """``<name>+<hex key ID>+<base64(0x01 ‖ public key)>``."""
    raw = public_key if isinstance(public_key, bytes) else public_key_bytes(public_key)
    verifier = NoteVerifier.of(name, raw)
    encoded = base64.b64encode(bytes([ED25519_TYPE]) + raw).decode("ascii")
    return f"{name}+{verifier.key_id.hex()}+{encoded}"


def parse_verifier_key(vkey: str) -> NoteVerifier:
    """Parse a verifier key string; VerificationError if malformed or its ID is wrong."""
    parts = vkey.split("+", 2)  # the base64 part may itself contain "+"
    if len(parts) != 3:
        raise VerificationError("a verifier key has the form name+keyid+key")
    name, hex_id, encoded = parts
    if not _KEY_NAME.fullmatch(name) or not re.fullmatch(r"[0-9a-f]{8}", hex_id):
        raise VerificationError("verifier key: bad name or key ID")
    blob = _b64(encoded, "verifier key")
    if len(blob) != 33 or blob[0] != ED25519_TYPE:
        raise VerificationError("verifier key is not an Ed25519 (type 0x01) key")
    verifier = NoteVerifier.of(name, blob[1:])
    if verifier.key_id.hex() != hex_id:
        raise VerificationError(f"verifier key ID {hex_id} does not match its name and key")
    return verifier


def _check_note_text(text: str) -> None:
    if not text.endswith("\n"):
        raise ProvenanceError("note text must end with a newline")
    if any(ord(c) < 0x20 and c != "\n" for c in text):
        raise ProvenanceError("note text must not hold control characters")


def sign_note(text: str, key_name: str, signing_key: Ed25519PrivateKey) -> str:
    """The signed note: text, blank line, one Ed25519 signature line."""
    _check_note_text(text)
    verifier = NoteVerifier.of(key_name, signing_key.public_key())
    sig = signing_key.sign(text.encode("utf-8"))
    blob = base64.b64encode(verifier.key_id + sig).decode("ascii")
    return f"{text}\n{SIGNATURE_PREFIX}{key_name} {blob}\n"


def split_note(note: str) -> tuple[str, list[tuple[str, bytes, bytes]]]:
    """(text, [(key name, key ID, signature)]) of a note, unverified. VerificationError."""
    if not note.endswith("\n"):
        raise VerificationError("note does not end with a newline")
    cut = note.rfind("\n\n")
    if cut < 0:
        raise VerificationError("note has no blank line before its signatures")
    text, sig_block = note[: cut + 1], note[cut + 2 :]
    lines = sig_block[:-1].split("\n")
    if not sig_block or len(lines) > MAX_SIGNATURES:
        raise VerificationError("note has no signature lines or too many")
    signatures = []
    for line in lines:
        if not line.startswith(SIGNATURE_PREFIX):
            raise VerificationError("note signature line does not start with an em dash")
        parts = line[len(SIGNATURE_PREFIX) :].split(" ")
        if len(parts) != 2 or not _KEY_NAME.fullmatch(parts[0]):
            raise VerificationError("note signature line is malformed")
        blob = _b64(parts[1], "note signature")
        if len(blob) < 5:
            raise VerificationError("note signature is too short")
        signatures.append((parts[0], blob[:4], blob[4:]))
    return text, signatures


def verify_note(note: str, verifier_keys: Iterable[NoteVerifier | str]) -> str:
    """Verify a signed note and return its text.

    Signatures by keys not in ``verifier_keys`` are ignored; a signature that names a
    known key (name and ID) but does not verify rejects the note; a note with no verified
    known signature is rejected. Raises VerificationError.
    """
    verifiers = [parse_verifier_key(v) if isinstance(v, str) else v for v in verifier_keys]
    text, signatures = split_note(note)
    _check_signatures(text, signatures, verifiers)
    return text


def _check_signatures(
    text: str, signatures: list[tuple[str, bytes, bytes]], verifiers: Iterable[NoteVerifier]
) -> None:
    known = {(v.name, v.key_id): v for v in verifiers}
    message = text.encode("utf-8")
    verified = 0
    for name, key_id, sig in signatures:
        verifier = known.get((name, key_id))
        if verifier is None:
            continue
        try:
            if len(sig) != 64:
                raise InvalidSignature
            verifier.public_key.verify(sig, message)
        except InvalidSignature:
            raise VerificationError(
                f"note signature by {name} ({key_id.hex()}) does not verify"
            ) from None
        verified += 1
    if not verified:
        raise VerificationError("note has no valid signature by a known key")


# ---------------------------------------------------------------------------------------
# Convenience: checkpoints signed with key name = origin


def sign_checkpoint(origin: str, size: int, root: bytes, signing_key: Ed25519PrivateKey) -> str:
    """Format and sign a checkpoint with the key name set to the origin."""
    return sign_note(format_checkpoint(origin, size, root), origin, signing_key)


def _origin_verifier(origin: str, key: bytes | Ed25519PublicKey) -> NoteVerifier:
    return _cached_verifier(origin, key) if isinstance(key, bytes) else NoteVerifier.of(origin, key)


@functools.lru_cache(maxsize=256)
def _cached_verifier(origin: str, raw: bytes) -> NoteVerifier:
    # A log's checkpoints all share one origin and a few keys.
    return NoteVerifier.of(origin, raw)


def verify_checkpoint(
    note: str,
    public_keys: Iterable[bytes | Ed25519PublicKey],
    *,
    origin: str | None = None,
) -> Checkpoint:
    """Verify a checkpoint note signed (key name = origin) by one of ``public_keys`` and
    return it. With ``origin`` given, a checkpoint of any other origin is rejected; without
    it the note's own origin line names the key. Raises VerificationError."""
    text, signatures = split_note(note)
    checkpoint = parse_checkpoint(text)
    if origin is not None and checkpoint.origin != origin:
        raise VerificationError(
            f"checkpoint origin {checkpoint.origin!r} is not the expected {origin!r}"
        )
    try:
        verifiers = [_origin_verifier(checkpoint.origin, k) for k in public_keys]
    except ProvenanceError as exc:
        raise VerificationError(f"checkpoint origin cannot name a key: {exc}") from exc
    _check_signatures(text, signatures, verifiers)
    return checkpoint
