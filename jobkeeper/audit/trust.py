"""Which signers a keep trusts: its own keys (``keys/``) and the keys its owner trusted
(``trusted-keys.json`` in the keep, see :mod:`jobkeeper.provenance.trusted`); never the
keys the archive lists, which whoever writes the archive can add to.

Everything here takes the keep's directory and key folder, not the store: the store is
consulted only as a convenient source of a public key whose fingerprint the owner typed
in full (the fingerprint is the SHA-256 of the key, so the store cannot substitute one).
"""

from __future__ import annotations

import base64
import os
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING

from jobkeeper.exceptions import ConfigError, ProvenanceError, VerificationError
from jobkeeper.provenance.keys import KeyRing, fingerprint
from jobkeeper.provenance.trusted import (
    TrustedKey,
    check_fingerprint,
    public_key_from_file,
    read_trusted,
    write_trusted,
)

if TYPE_CHECKING:
    from jobkeeper.store import Store

TRUST_FILE = "trusted-keys.json"
OWN_NAME = "this keep"


def trust_command(fp: str) -> str:
    return f"jobkeeper trust add {fp} --name NAME"


@dataclass
class TrustSet:
    """The keys a verifier accepts as signers, with the retirement bounds of old ones."""

    keys: dict[str, bytes] = field(default_factory=dict)
    retired_from: dict[str, int] = field(default_factory=dict)
    names: dict[str, str] = field(default_factory=dict)

    def pinned(self, fingerprints: list[str], listed: Mapping[str, bytes]) -> TrustSet:
        """Only the given keys (``--key``): their raw key from this set, else from
        ``listed`` (safe: the fingerprint is the key's hash, checked on use)."""
        chosen = TrustSet(retired_from=dict(self.retired_from), names=dict(self.names))
        for fp in fingerprints:
            raw = self.keys.get(fp, listed.get(fp))
            if raw is not None:
                chosen.keys[fp] = raw
        return chosen

    def retirement_problem(self, signers: list[str], index: int) -> str | None:
        """A problem when every signer of the entry at ``index`` had been retired by then."""
        late = [fp for fp in signers if fp in self.retired_from and index >= self.retired_from[fp]]
        if not signers or len(late) < len(signers):
            return None
        fp = late[0]
        return (
            f"signed by retired key {fp} after its retirement: its successor signs from log "
            f"index {self.retired_from[fp]}"
        )


def _path(keep: Path) -> Path:
    return keep / TRUST_FILE


def _own(keyring: KeyRing) -> dict[str, bytes]:
    return keyring.public_key_map() if keyring.exists() else {}


def load_trust(keep: Path, keyring: KeyRing) -> TrustSet:
    trust = TrustSet()
    for fp, raw in _own(keyring).items():
        trust.keys[fp], trust.names[fp] = raw, OWN_NAME
    for key in read_trusted(_path(keep)) or []:
        trust.keys[key.fingerprint] = key.public_key
        trust.names.setdefault(key.fingerprint, key.name)
        if key.retired and key.retired_from is not None:
            trust.retired_from[key.fingerprint] = key.retired_from
    return trust


def start_trust_file(keep: Path) -> bool:
    """Create an empty trusted-keys file if there is none; True if it was created."""
    if _path(keep).exists():
        return False
    write_trusted(_path(keep), [])
    return True


def first_use_notice(keep: Path, keyring: KeyRing, listed: Mapping[str, str]) -> str | None:
    """For a keep made before trust roots: start its list and say which keys the archive
    lists that it does not trust. None when the keep already had its list."""
    try:
        if not start_trust_file(keep):
            return None
    except ProvenanceError:
        return None  # a read-only keep: nothing can be recorded; say it next time
    own = _own(keyring)
    others = sorted(fp for fp in listed if fp not in own)
    text = (
        f"this keep had no list of trusted keys: it now trusts only its own key(s) and "
        f"records the keys you trust in {_path(keep)}"
    )
    if others:
        text += (
            "; the archive also lists keys it does not trust: "
            + ", ".join(others)
            + f" (to trust one: {trust_command('FINGERPRINT')})"
        )
    return text


def trusted_keys(keep: Path) -> list[TrustedKey]:
    return list(read_trusted(_path(keep)) or [])


def add(
    keep: Path, keyring: KeyRing, fp_text: str, name: str, *, listed: Mapping[str, str],
    key_file: Path | None = None,
) -> tuple[TrustedKey, bool]:  # fmt: skip
    """Trust the key with this full fingerprint; (entry, False) if it already was."""
    fp = check_fingerprint(fp_text)
    if not name.strip():
        raise ConfigError("give the key a name with --name (who holds it)")
    if key_file is not None:
        raw = public_key_from_file(key_file)
    elif fp in listed:
        raw = base64.b64decode(listed[fp])
    else:
        raise ConfigError(
            f"the archive lists no key {fp}; give its public key with --key FILE "
            "(a PEM public key or the JSON of `jobkeeper keys --export`)"
        )
    if fingerprint(raw) != fp:
        raise VerificationError(
            f"the public key found for {fp} has fingerprint {fingerprint(raw)}: not trusted"
        )
    current = trusted_keys(keep)
    for key in current:
        if key.fingerprint == fp:
            return key, False
    if fp in _own(keyring):
        raise ConfigError(f"{fp} is this keep's own key: it is trusted already")
    entry = TrustedKey.new(raw, name.strip())
    write_trusted(_path(keep), [*current, entry])
    return entry, True


def remove(keep: Path, keyring: KeyRing, fp_text: str) -> TrustedKey:
    fp = check_fingerprint(fp_text)
    current = trusted_keys(keep)
    kept = [k for k in current if k.fingerprint != fp]
    if len(kept) == len(current):
        if fp in _own(keyring):
            raise ConfigError(f"{fp} is this keep's own key: it cannot be untrusted")
        raise ConfigError(f"{fp} is not among the trusted keys (see `jobkeeper trust list`)")
    write_trusted(_path(keep), kept)
    return next(k for k in current if k.fingerprint == fp)


def import_file(keep: Path, keyring: KeyRing, source: Path) -> tuple[int, int]:
    """Merge a shared trusted-keys file: (keys added, retirements taken over). A key
    already trusted keeps its entry, except that a retirement the file records is adopted
    (a retirement only ever narrows what a key may sign)."""
    incoming = read_trusted(source)
    if incoming is None:
        raise ConfigError(f"no file {source}")
    own = _own(keyring)
    current = {k.fingerprint: k for k in trusted_keys(keep)}
    added = retired = 0
    for key in incoming:
        if key.name == OWN_NAME:  # another keep's own key, named after the shared file
            key = replace(key, name=source.stem)
        have = current.get(key.fingerprint)
        if have is None and key.fingerprint in own and not key.retired:
            continue
        if have is None:
            current[key.fingerprint] = key
            added += 1
        elif (
            key.retired
            and key.retired_from is not None
            and (
                not have.retired
                or have.retired_from is None
                or key.retired_from < have.retired_from
            )
        ):
            current[key.fingerprint] = have.retire(key.retired_from, key.successor)
            retired += 1
    write_trusted(_path(keep), current.values())
    return added, retired


def record_rotation(keep: Path, old: TrustedKey, from_index: int, successor: str) -> None:
    """After ``keys --rotate``: the old key stays trusted for entries before
    ``from_index`` (the log's size when the new key took over), and only for them."""
    current = [k for k in trusted_keys(keep) if k.fingerprint != old.fingerprint]
    write_trusted(_path(keep), [*current, old.retire(from_index, successor)])


def listing(keep: Path, keyring: KeyRing) -> list[tuple[TrustedKey, str]]:
    """Every trusted key with where it comes from (``own`` or ``trusted``)."""
    recorded = {k.fingerprint: k for k in trusted_keys(keep)}
    rows: list[tuple[TrustedKey, str]] = []
    if keyring.exists():
        for record in keyring.public_keys():
            entry = recorded.pop(record.fingerprint, None) or TrustedKey(
                record.fingerprint, record.raw, OWN_NAME, record.created_at
            )
            rows.append((entry, "own"))
    rows += [(key, "trusted") for key in recorded.values()]
    return rows


class KeepTrust:
    """One keep's trust, as :attr:`jobkeeper.Keeper.trust` hands it out."""

    def __init__(self, keep: Path, keyring: KeyRing, store: Store) -> None:
        self.keep, self.keyring, self.store = keep, keyring, store

    def load(self) -> TrustSet:
        return load_trust(self.keep, self.keyring)

    def for_verify(self) -> tuple[TrustSet, list[str]]:
        """The trusted keys, and what a keep made before trust roots is told at its first
        verify (its list is started now)."""
        notice = first_use_notice(self.keep, self.keyring, self.store.public_keys())
        return self.load(), [notice] if notice else []

    def add(
        self, fingerprint: str, name: str, *, key_file: str | os.PathLike[str] | None = None
    ) -> tuple[TrustedKey, bool]:
        """Trust the key with this full fingerprint; its public key comes from ``key_file``
        or else from the keys the archive lists (checked against the fingerprint).
        Returns the entry and whether it is new."""
        return add(
            self.keep, self.keyring, fingerprint, name, listed=self.store.public_keys(),
            key_file=None if key_file is None else Path(key_file),
        )  # fmt: skip

    def remove(self, fingerprint: str) -> TrustedKey:
        return remove(self.keep, self.keyring, fingerprint)

    def list(self) -> list[tuple[TrustedKey, str]]:
        """Every trusted signer with its source: ``own`` (``keys/``) or ``trusted``."""
        return listing(self.keep, self.keyring)

    def import_file(self, source: str | os.PathLike[str]) -> tuple[int, int]:
        """Merge a shared trusted-keys file: (keys added, retirements adopted)."""
        return import_file(self.keep, self.keyring, Path(source))

    def rotate(self) -> tuple[str, str, int]:
        """A new signing key; the old one stays trusted for the entries before the log's
        present size and is retired from there. Returns (old, new, retired-from index).
        Stop this keep's workers first: one still signing with the old key after this
        index makes entries that verify as signed by a retired key."""
        old = self.keyring.active_record()
        from_index = len(self.store.log_entries())
        new = self.keyring.rotate()
        self.store.register_key(new.fingerprint, new.public_key)
        entry = TrustedKey(old.fingerprint, old.raw, OWN_NAME, old.created_at)
        record_rotation(self.keep, entry, from_index, new.fingerprint)
        return old.fingerprint, new.fingerprint, from_index
