"""The list of signing keys a verifier trusts, kept apart from what it verifies.

A keep's archive lists the public keys of whoever signed its entries, but whoever can
write the archive can list a key of their own; so trust is rooted in a small file the
verifier holds, never in the archive. Trusted = the keep's own keys (``keys/``) and the
keys of this file.

Format ``jobkeeper-trusted-keys/v2`` (UTF-8 JSON object), the same for a keep's own file
(``KEEP/trusted-keys.json``) and for a team's shared list kept in its own repository::

    format   "jobkeeper-trusted-keys/v2"
    keys     [{"fingerprint":  64 lowercase hex, SHA-256 of the raw public key,
               "public_key":   standard base64 of the raw 32-byte Ed25519 key,
               "name":         who holds the key (free text),
               "added_at":     RFC 3339 UTC, when it was trusted,
               "retired":      true once a successor key signs instead,
               "retired_from": log index from which the successor signs (or null),
               "successor":    the successor's fingerprint (or null)}]

Version 1 wrote ``publicKey``, ``addedAt`` and ``retiredFrom``; it is still read (a team's
shared file need not be rewritten), and written again as version 2.

The public key itself is stored, so verification never needs the archive's copy; each
entry's fingerprint is checked against its key when read.
"""

from __future__ import annotations

import base64
import binascii
import json
import os
import secrets
from collections.abc import Iterable
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

from jobkeeper.exceptions import ConfigError, ProvenanceError, VerificationError
from jobkeeper.provenance.keys import fingerprint, load_public_key, utc_now_rfc3339

FORMAT = "jobkeeper-trusted-keys/v2"
#: The first format: the same fields, three of them named in lowerCamelCase.
FORMAT_V1 = "jobkeeper-trusted-keys/v1"
_V1_NAMES = {"public_key": "publicKey", "added_at": "addedAt", "retired_from": "retiredFrom"}
HEX = set("0123456789abcdef")


def check_fingerprint(text: str) -> str:
    """A full fingerprint, lowercased; ConfigError (bad input) for a prefix or anything else."""
    fp = text.strip().lower()
    if len(fp) != 64 or not set(fp) <= HEX:
        raise ConfigError(
            f"{text!r} is not a full key fingerprint (64 hex digits); prefixes are not accepted"
        )
    return fp


@dataclass(frozen=True)
class TrustedKey:
    fingerprint: str
    public_key: bytes  # raw 32 bytes
    name: str
    added_at: str
    retired: bool = False
    retired_from: int | None = None  # the log index from which the successor signs
    successor: str | None = None

    @classmethod
    def new(cls, raw: bytes, name: str) -> TrustedKey:
        return cls(fingerprint(raw), raw, name, utc_now_rfc3339())

    def retire(self, from_index: int, successor: str | None) -> TrustedKey:
        return replace(self, retired=True, retired_from=from_index, successor=successor)

    def to_dict(self) -> dict[str, Any]:
        return {
            "fingerprint": self.fingerprint,
            "public_key": base64.b64encode(self.public_key).decode("ascii"),
            "name": self.name,
            "added_at": self.added_at,
            "retired": self.retired,
            "retired_from": self.retired_from,
            "successor": self.successor,
        }

    @classmethod
    def from_dict(cls, data: Any, where: str) -> TrustedKey:
        if not isinstance(data, dict):
            raise VerificationError(f"{where}: an entry is not a JSON object")
        data = {new: data[old] for new, old in _V1_NAMES.items() if old in data} | data
        try:
            fp = str(data["fingerprint"])
            if fp != fp.lower() or len(fp) != 64 or not set(fp) <= HEX:
                raise VerificationError(f"{where}: {fp!r} is not a full fingerprint")
            raw = base64.b64decode(str(data["public_key"]), validate=True)
            name, added = str(data.get("name") or ""), str(data.get("added_at") or "")
        except KeyError as exc:
            raise VerificationError(f"{where}: an entry lacks {exc.args[0]!r}") from None
        except (binascii.Error, ValueError) as exc:
            raise VerificationError(f"{where}: public_key of {data.get('fingerprint')}") from exc
        load_public_key(raw)
        if fingerprint(raw) != fp:
            raise VerificationError(f"{where}: key {fp} is not the key its entry holds")
        retired_from = data.get("retired_from")
        if retired_from is not None and (
            isinstance(retired_from, bool) or not isinstance(retired_from, int) or retired_from < 0
        ):
            raise VerificationError(f"{where}: retired_from of {fp} is not a log index")
        successor = data.get("successor")
        try:
            after = None if successor is None else check_fingerprint(str(successor))
        except ConfigError as exc:
            raise VerificationError(f"{where}: successor of {fp}: {exc}") from None
        return cls(fp, raw, name, added, bool(data.get("retired", False)), retired_from, after)


def parse_trusted(data: Any, where: str) -> list[TrustedKey]:
    if not isinstance(data, dict) or data.get("format") not in (FORMAT, FORMAT_V1):
        raise VerificationError(f"{where} is not a {FORMAT} document")
    entries = data.get("keys")
    if not isinstance(entries, list):
        raise VerificationError(f"{where}: 'keys' must be a list")
    keys = [TrustedKey.from_dict(item, where) for item in entries]
    seen: set[str] = set()
    for key in keys:
        if key.fingerprint in seen:
            raise VerificationError(f"{where}: key {key.fingerprint} is listed twice")
        seen.add(key.fingerprint)
    return keys


def read_trusted(path: Path) -> list[TrustedKey] | None:
    """The keys of a trusted-keys file; None when there is no such file."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        return None
    except OSError as exc:
        raise ProvenanceError(f"cannot read {path}: {exc.strerror}") from exc
    try:
        data = json.loads(text)
    except ValueError as exc:
        raise VerificationError(f"{path} is not JSON: {exc}") from exc
    return parse_trusted(data, str(path))


def trusted_document(keys: Iterable[TrustedKey]) -> dict[str, Any]:
    return {"format": FORMAT, "keys": [k.to_dict() for k in keys]}


def write_trusted(path: Path, keys: Iterable[TrustedKey]) -> None:
    """Write the file atomically (temporary name, then rename)."""
    text = json.dumps(trusted_document(keys), indent=2) + "\n"
    tmp = path.with_name(f".{path.name}.{secrets.token_hex(8)}.tmp")
    try:
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise ProvenanceError(f"cannot write {path}: {exc.strerror}") from exc


def public_key_from_file(path: Path) -> bytes:
    """The raw public key in ``path``: a PEM public key, the JSON that ``jobkeeper keys
    --export`` writes, or a ``keys/<fingerprint>.pub.json`` record."""
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise VerificationError(f"cannot read key file {path}: {exc.strerror}") from exc
    if data.lstrip().startswith(b"-----BEGIN"):
        from cryptography.hazmat.primitives import serialization

        try:
            key = serialization.load_pem_public_key(data)
            raw = key.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
        except (ValueError, TypeError) as exc:
            raise VerificationError(f"{path} is not an Ed25519 PEM public key") from exc
        load_public_key(raw)
        return raw
    try:
        obj = json.loads(data)
        text = obj.get("publicKey", obj.get("public_key"))
        raw = base64.b64decode(str(text), validate=True)
    except (ValueError, AttributeError, binascii.Error) as exc:
        raise VerificationError(
            f"{path} holds no public key (a PEM public key, or the JSON of `jobkeeper keys "
            "--export`)"
        ) from exc
    load_public_key(raw)
    return raw
