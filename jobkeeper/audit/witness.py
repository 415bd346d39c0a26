"""The witness: the keep's latest signed checkpoint, kept outside the database.

The log's checkpoints live in the archive, so whoever rolls the archive back (deletes the
last entries with their checkpoints and results, truncates the file, swaps in an older
copy) rolls them back too, and the shortened log verifies on its own. The witness is a
small file in the keep (``witness.json``) holding the latest checkpoint it has seen,
written after each commit; ``verify`` proves with an RFC 9162 consistency proof that the
archive's log extends it. A bundle's checkpoint, or a witness copied elsewhere, serves
the same way (``verify --since``).

Format ``jobkeeper-witness/v1`` (UTF-8 JSON object)::

    format      "jobkeeper-witness/v1"
    origin      the log's origin (informational; the signed checkpoint is authoritative)
    size        the checkpoint's size (informational, likewise)
    checkpoint  the signed checkpoint note (C2SP signed note, key name = origin)
    written_on  when this file was written (RFC 3339, UTC)

Limits: the witness only moves forward (a write never replaces a larger checkpoint of the
same origin), but two writers racing may leave the smaller of their two checkpoints; it
is still a checkpoint the log must extend. Losing the witness and the database together is
only detectable from a checkpoint or bundle held elsewhere.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import secrets
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

from jobkeeper.exceptions import ProvenanceError, StoreUnavailable, VerificationError
from jobkeeper.provenance.checkpoint import (
    Checkpoint,
    parse_checkpoint,
    split_note,
    verify_checkpoint,
)
from jobkeeper.provenance.dsse import strict_json_loads
from jobkeeper.provenance.merkle import MerkleTree, verify_consistency
from jobkeeper.provenance.report import VerifyReport

WITNESS_NAME = "witness.json"
FORMAT = "jobkeeper-witness/v1"
BUNDLE_FORMAT = "jobkeeper-audit-bundle/v1"


@dataclass(frozen=True)
class Anchor:
    """A signed checkpoint the log must extend, and where it came from."""

    note: str
    source: str  # for messages: "the witness", "the checkpoint in FILE"


def _unsigned_size(note: str) -> tuple[str, int]:
    try:
        cp = parse_checkpoint(split_note(note)[0])
    except VerificationError:
        return "", -1
    return cp.origin, cp.size


def read_witness(path: Path) -> Anchor | None:
    """The witness at ``path``; None when there is none. VerificationError when it exists
    but cannot be read as one (a damaged witness is a finding, never a silent fresh start)."""
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        return None
    except OSError as exc:
        raise VerificationError(f"the witness {path} cannot be read: {exc}") from exc
    return Anchor(_note_of(data, str(path)), "the witness")


def _note_of(data: bytes, name: str) -> str:
    """The checkpoint note in a witness, a bundle, or a file holding a note."""
    if data.lstrip()[:1] == b"{":
        doc = strict_json_loads(data, name)
        kind = doc.get("format") if isinstance(doc, dict) else None
        if kind not in (FORMAT, BUNDLE_FORMAT):
            raise VerificationError(f"{name} is neither a {FORMAT} witness nor a bundle")
        note = doc.get("checkpoint")
        if not isinstance(note, str):
            raise VerificationError(f"{name} holds no checkpoint")
        return note
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError:
        raise VerificationError(f"{name} is not a checkpoint, a witness or a bundle") from None


def read_anchor(path: Path) -> Anchor:
    """The checkpoint of a bundle, a witness or a checkpoint note (``verify --since``)."""
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise VerificationError(f"cannot read {path}: {exc}") from exc
    return Anchor(_note_of(data, str(path)), f"the checkpoint in {path}")


def write_witness(path: Path, note: str) -> bool:
    """Record ``note`` as the witness, unless the one there already has a checkpoint at
    least as large of the same origin. Atomic (temporary file, sync, rename). True when
    written. OSError is the caller's to judge."""
    origin, size = _unsigned_size(note)
    if size < 0:
        raise ProvenanceError("not a checkpoint note")
    try:
        current = read_witness(path)
    except VerificationError:
        current = None  # a damaged witness is replaced only by verify, after it reported it
    if current is not None:
        have_origin, have_size = _unsigned_size(current.note)
        if have_origin == origin and have_size >= size:
            return False
    stamp = dt.datetime.now(tz=dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    doc = {"format": FORMAT, "origin": origin, "size": size, "checkpoint": note,
           "written_on": stamp}  # fmt: skip
    tmp = path.with_name(f".{path.name}.{secrets.token_hex(6)}.tmp")
    try:
        with open(tmp, "w", encoding="utf-8") as out:
            out.write(json.dumps(doc, indent=1, ensure_ascii=False) + "\n")
            out.flush()
            os.fsync(out.fileno())  # a crash must leave the old witness or the new, whole
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)
    return True


def refuse_lost_archive(keep: Path, location: str) -> None:
    """Before a new archive is made at ``location``: if the keep's witness has seen a
    log, the archive was lost, and starting a fresh one would hide that (exit 3)."""
    try:
        anchor = read_witness(keep / WITNESS_NAME)
    except VerificationError:
        anchor = None
    size = -1 if anchor is None else _unsigned_size(anchor.note)[1]
    if size > 0:
        raise StoreUnavailable(
            f"no archive at {location}, but this keep's witness saw a log of {size} entries: "
            "the archive was lost; restore it from a backup (jobkeeper will not start a new "
            f"one while {keep / WITNESS_NAME} remembers the old one)"
        )


def check_extends(
    anchor: Anchor,
    tree: MerkleTree,
    latest: Checkpoint | None,
    keys: Sequence[bytes],
    origin: str | None,
    report: VerifyReport,
) -> Checkpoint | None:
    """Prove that the log (``tree``, whose latest signed checkpoint is ``latest``) extends
    the anchor's checkpoint: same origin, at least as long, and an RFC 9162 consistency
    proof (§2.1.4) from the anchor's root to the latest root. Problems go to ``report``;
    returns the anchor's checkpoint when its signature held."""
    where = anchor.source
    try:
        cp = verify_checkpoint(anchor.note, keys)
    except VerificationError as exc:
        report.problems.append(f"{where}: {exc}")
        return None
    if origin is not None and cp.origin != origin:
        report.problems.append(
            f"{where} is of log {cp.origin!r}, but the archive's log is {origin!r}: the "
            "archive was replaced by another one"
        )
        return cp
    if cp.size > tree.size:
        gone = "the log is empty" if tree.size == 0 else f"the log holds only {tree.size}"
        report.problems.append(
            f"{where} saw {cp.size} log entries, but {gone}: entries were removed or the "
            "archive was rolled back or truncated"
        )
        return cp
    if cp.size == 0:
        return cp
    if latest is None or latest.size < cp.size:
        have = "none" if latest is None else f"size {latest.size}"
        report.problems.append(
            f"{where} has size {cp.size}, but the archive's latest checkpoint has {have}: "
            "checkpoints were removed or rolled back"
        )
        return cp
    try:
        proof = [] if latest.size == cp.size else tree.consistency_proof(cp.size, latest.size)
        verify_consistency(cp.size, latest.size, cp.root, latest.root, proof)
        if tree.root(cp.size) != cp.root:
            raise VerificationError("the stored entries give another root at its size")
    except (VerificationError, ProvenanceError) as exc:
        report.problems.append(
            f"the log does not extend {where} (size {cp.size}): it was rewritten ({exc})"
        )
    return cp


def latest_checkpoint(notes: Sequence[str], keys: Mapping[str, bytes]) -> Checkpoint | None:
    """The last of the archive's checkpoints whose signature holds (None if none does)."""
    for note in reversed(notes):
        try:
            return verify_checkpoint(note, list(keys.values()))
        except VerificationError:
            continue
    return None


__all__ = [
    "FORMAT",
    "WITNESS_NAME",
    "Anchor",
    "check_extends",
    "latest_checkpoint",
    "read_anchor",
    "read_witness",
    "refuse_lost_archive",
    "write_witness",
]
