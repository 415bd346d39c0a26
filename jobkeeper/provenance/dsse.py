"""DSSE v1 envelopes (secure-systems-lab/dsse protocol.md and envelope.md, v1.0.2).

The signature covers PAE(payloadType, body): the exact body bytes plus their type, so no
canonicalisation is needed to verify and the type cannot be swapped. ``keyid`` is an
unauthenticated hint: it may order the keys tried, never decide which key is trusted.
"""

from __future__ import annotations

import base64
import binascii
import functools
import json
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any

from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey, Ed25519PublicKey

from jobkeeper.exceptions import ProvenanceError, VerificationError
from jobkeeper.hashing import canonical_json
from jobkeeper.provenance.keys import fingerprint, load_public_key, public_key_bytes

PAYLOAD_TYPE = "application/vnd.in-toto+json"


def pae(payload_type: str, body: bytes) -> bytes:
    """DSSE v1 pre-authentication encoding; lengths are byte lengths in ASCII decimal."""
    type_bytes = payload_type.encode("utf-8")
    return b"DSSEv1 %d %b %d %b" % (len(type_bytes), type_bytes, len(body), body)


def b64decode_strict(text: str, what: str) -> bytes:
    """Decode standard or URL-safe base64 (DSSE requires both), padded and canonical.

    Canonical means re-encoding gives the same text back: otherwise unused trailing bits
    could be flipped without changing the decoded bytes, and an edit would go unnoticed.
    """
    if not isinstance(text, str):
        raise VerificationError(f"{what} must be a base64 string")
    # The alphabet is chosen by its distinctive characters; mixing both alphabets fails
    # the canonical re-encoding check below, anything else fails validate=True.
    alt = "-" in text or "_" in text
    try:
        data = base64.b64decode(text, altchars=b"-_" if alt else None, validate=True)
    except (binascii.Error, ValueError):
        raise VerificationError(
            f"{what} is not valid base64 (alphabet, length or padding)"
        ) from None
    again = base64.b64encode(data, altchars=b"-_" if alt else None).decode("ascii")
    if again != text:
        raise VerificationError(f"{what} is not canonical base64 (stray bits or padding)")
    return data


def _reject_constant(name: str) -> Any:
    raise VerificationError(f"JSON holds {name}, which is not JSON")


def _unique_object(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    obj = dict(pairs)  # C speed; a shorter dict means a member name came twice
    if len(obj) != len(pairs):
        names = [k for k, _ in pairs]
        twice = next(k for k in names if names.count(k) > 1)
        raise VerificationError(f"JSON object has the member {twice!r} twice")
    return obj


def _safe_int(text: str) -> int:
    value = int(text)
    if abs(value) > 2**53 - 1:
        raise VerificationError(f"JSON integer {text} is beyond ±(2^53−1) (I-JSON)")
    return value


def _has_lone_surrogate(value: Any) -> bool:
    if isinstance(value, str):
        return any("\ud800" <= c <= "\udfff" for c in value)
    if isinstance(value, dict):
        return any(_has_lone_surrogate(k) or _has_lone_surrogate(v) for k, v in value.items())
    if isinstance(value, list):
        return any(_has_lone_surrogate(v) for v in value)
    return False


# One decoder for all calls: json.loads would build a new one each time.
_DECODER = json.JSONDecoder(
    object_pairs_hook=_unique_object, parse_constant=_reject_constant, parse_int=_safe_int
)


def strict_json_loads(data: bytes | str, what: str) -> Any:
    """json.loads for I-JSON (RFC 7493): refuses duplicate members, NaN/Infinity, bad
    UTF-8, lone surrogates and integers beyond ±(2^53−1).

    Python keeps the last duplicate silently; two parsers disagreeing on which member
    counts is a classic signature-bypass, so duplicates are an error.
    """
    try:
        text = data.decode("utf-8") if isinstance(data, bytes) else data
        value = _DECODER.decode(text)
        # A lone surrogate can only enter through a \uD8xx–\uDFxx escape; look only then.
        if ("\\ud" in text or "\\uD" in text) and _has_lone_surrogate(value):
            raise VerificationError(f"{what} holds a lone surrogate, which is not Unicode text")
        return value
    except UnicodeDecodeError:
        raise VerificationError(f"{what} is not UTF-8") from None
    except json.JSONDecodeError as exc:
        raise VerificationError(f"{what} is not valid JSON: {exc.msg} at {exc.pos}") from None
    except RecursionError:
        raise VerificationError(f"{what} is nested too deeply") from None


def sign_envelope(
    body: bytes, payload_type: str, key: Ed25519PrivateKey, *, keyid: str | None = None
) -> dict[str, Any]:
    """A DSSE envelope over ``body`` signed with ``key``; ``keyid`` is the key's
    fingerprint (given by a caller that signs often, computed otherwise)."""
    signature = key.sign(pae(payload_type, body))
    return {
        "payload": base64.b64encode(body).decode("ascii"),
        "payloadType": payload_type,
        "signatures": [
            {
                "keyid": fingerprint(key) if keyid is None else keyid,
                "sig": base64.b64encode(signature).decode("ascii"),
            }
        ],
    }


def envelope_bytes(envelope: Mapping[str, Any]) -> bytes:
    """The stored form of an envelope: RFC 8785 canonical JSON. This is the log leaf.

    ProvenanceError if the envelope holds values outside I-JSON (huge integers, NaN, ...),
    which only a hand-made envelope can."""
    try:
        return canonical_json(dict(envelope))
    except Exception as exc:  # rfc8785's own errors, TypeError, RecursionError
        raise ProvenanceError(f"envelope cannot be canonicalised: {exc}") from exc


@dataclass(frozen=True)
class VerifiedEnvelope:
    """What a successful verification established."""

    payload: bytes  # the very bytes that were verified; parse these, never re-read
    payload_type: str
    signers: tuple[str, ...]  # fingerprints of the trusted keys whose signature held


class KeyTable(dict[str, Ed25519PublicKey]):
    """Trusted keys by recomputed fingerprint; build once with ``key_table`` and pass it
    to every verification of a batch to skip re-deriving the fingerprints."""


# fingerprint → raw key (labels are ignored), raw keys or key objects, or a KeyTable.
TrustedKeys = KeyTable | Mapping[str, bytes] | Iterable[bytes | Ed25519PublicKey]


@functools.lru_cache(maxsize=256)
def _trusted_key(raw: bytes) -> tuple[str, Ed25519PublicKey]:
    # Cached: a log verification passes the same few keys for every entry.
    return fingerprint(raw), load_public_key(raw)


def key_table(keys: TrustedKeys) -> KeyTable:
    """Index trusted keys by their fingerprint, recomputed from the keys themselves."""
    return _key_table(keys)


def _key_table(keys: TrustedKeys) -> KeyTable:
    # Fingerprints are recomputed from the keys, so a mislabelled mapping cannot mislead.
    if isinstance(keys, KeyTable):
        return keys
    values = keys.values() if isinstance(keys, Mapping) else keys
    table = KeyTable()
    for value in values:
        if isinstance(value, bytes):
            fp, pub = _trusted_key(value)
        else:
            fp, pub = fingerprint(public_key_bytes(value)), value
        table[fp] = pub
    return table


def _as_envelope(envelope: Mapping[str, Any] | bytes | str) -> Mapping[str, Any]:
    if isinstance(envelope, bytes | str):
        envelope = strict_json_loads(envelope, "envelope")
    if not isinstance(envelope, Mapping):
        raise VerificationError("envelope is not a JSON object")
    return envelope


def verify_envelope_detailed(
    envelope: Mapping[str, Any] | bytes | str,
    trusted_public_keys: TrustedKeys,
    *,
    payload_types: Iterable[str] = (PAYLOAD_TYPE,),
    threshold: int = 1,
) -> VerifiedEnvelope:
    """Verify a DSSE envelope against keys the *verifier* trusts.

    Succeeds when at least ``threshold`` distinct trusted keys have a valid signature over
    PAE(payloadType, payload) and the payloadType is one of ``payload_types``. Signatures
    by unknown keys are ignored (each DSSE signature stands alone). Raises
    VerificationError with the precise reason otherwise.
    """
    env = _as_envelope(envelope)
    for name in ("payload", "payloadType", "signatures"):
        if name not in env:
            raise VerificationError(f"envelope lacks the required field {name!r}")
    payload_type = env["payloadType"]
    if not isinstance(payload_type, str):
        raise VerificationError("envelope payloadType is not a string")
    payload = b64decode_strict(env["payload"], "envelope payload")
    signatures = env["signatures"]
    if not isinstance(signatures, list) or not signatures:
        raise VerificationError("envelope has no signatures")
    decoded: list[tuple[str, bytes]] = []
    for i, entry in enumerate(signatures):
        if not isinstance(entry, Mapping) or "sig" not in entry:
            raise VerificationError(f"envelope signature {i} lacks 'sig'")
        keyid = entry.get("keyid", "")
        if not isinstance(keyid, str):
            raise VerificationError(f"envelope signature {i}: keyid is not a string")
        decoded.append((keyid, b64decode_strict(entry["sig"], f"envelope signature {i}")))
    if threshold < 1:
        raise ValueError("threshold must be at least 1")
    keys = _key_table(trusted_public_keys)
    if not keys:
        raise VerificationError("no trusted public keys were given")
    message = pae(payload_type, payload)
    signers: list[str] = []
    for keyid, sig in decoded:
        # The hint only orders the attempts; every trusted key may still be tried.
        order = [keyid] if keyid in keys else []
        for fp in order + [fp for fp in keys if fp != keyid]:
            if fp in signers or len(sig) != 64:
                continue
            try:
                keys[fp].verify(sig, message)
            except InvalidSignature:
                continue
            signers.append(fp)
            break
    if len(signers) < threshold:
        hints = ", ".join(k[:16] or "(none)" for k, _ in decoded)
        raise VerificationError(
            f"no valid signature by a trusted key ({len(signers)} of {threshold} needed; "
            f"{len(decoded)} signature(s), keyid hints: {hints})"
        )
    allowed = set(payload_types)
    if payload_type not in allowed:
        raise VerificationError(f"unsupported payloadType {payload_type!r}")
    return VerifiedEnvelope(payload, payload_type, tuple(signers))


def verify_envelope(
    envelope: Mapping[str, Any] | bytes | str,
    trusted_public_keys: TrustedKeys,
    *,
    payload_types: Iterable[str] = (PAYLOAD_TYPE,),
) -> bytes:
    """Verify a DSSE envelope and return the verified payload bytes (see the detailed form)."""
    return verify_envelope_detailed(
        envelope, trusted_public_keys, payload_types=payload_types
    ).payload
