"""Audit bundles: one JSON file a referee can verify offline with jobkeeper alone.

Format ``jobkeeper-audit-bundle/v1`` (UTF-8 JSON object; members in this order)::

    format      "jobkeeper-audit-bundle/v1"
    readme      list of plain-text lines explaining the file to a human reader
    origin      the log's origin (informational; the signed checkpoint is authoritative)
    keys        {fingerprint: standard base64 of the raw 32-byte Ed25519 public key}
    checkpoint  the latest signed checkpoint (C2SP signed note, key name = origin)
    entries     [{"index": log index,
                  "envelope": DSSE envelope object,
                  "inclusionProof": [standard base64 32-byte hashes, leaf to root],
                  "record": the keep's id of the job or comparison (optional; a name
                            for readers, not signed: the signed identity is the job key),
                  "documents": {job key: counts document} (a batch's entry only: the
                            points asked for, each checked against its subject)}]

The leaf of an entry is SHA-256(0x00 ‖ RFC 8785 canonical JSON of its envelope); each
inclusion proof leads from that leaf to the checkpoint's root at the checkpoint's size.
JSON rather than a zip: it is diffable, greppable, and has no archive-format pitfalls.
"""

from __future__ import annotations

import base64
import copy
import json
import os
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from jobkeeper.exceptions import ProvenanceError, VerificationError
from jobkeeper.outputs import write_output
from jobkeeper.provenance.checkpoint import (
    Checkpoint,
    parse_checkpoint,
    split_note,
    verify_checkpoint,
)
from jobkeeper.provenance.dsse import (
    b64decode_strict,
    envelope_bytes,
    key_table,
    strict_json_loads,
)
from jobkeeper.provenance.log import check_envelope, check_public_keys
from jobkeeper.provenance.merkle import MerkleTree, leaf_hash, verify_inclusion
from jobkeeper.provenance.report import VerifyReport

FORMAT = "jobkeeper-audit-bundle/v1"

README = [
    "This is a jobkeeper audit bundle: signed records of quantum circuit runs taken",
    "from one jobkeeper keep, with what is needed to check them offline.",
    "",
    "Each entry is a DSSE v1 envelope (payloadType application/vnd.in-toto+json)",
    "holding an in-toto Statement v1. Its subject is the counts document (counts.json,",
    "RFC 8785 canonical JSON of the measured counts) by SHA-256; its predicate",
    "(predicateType urn:jobkeeper:predicate:run:v2) records the circuit, parameters,",
    "shots, seed, backend, software and timestamps of the run, and the classical",
    "registers (names and widths, in declaration order) that lay out the count keys:",
    "registers in declaration order, the first declared leftmost, joined by '|', each",
    "written as its value in binary (highest index leftmost). Entries of the first",
    "version (https://jobkeeper.dev/attestation/run/v1) write the last declared",
    "register leftmost with a space between registers.",
    "",
    "The envelopes are signed with Ed25519 keys listed under 'keys' (fingerprint =",
    "SHA-256 of the raw public key). The keep appends every envelope to a Merkle log",
    "(RFC 9162 hashing); 'checkpoint' is the log's signed size and root (a C2SP",
    "tlog-checkpoint in a C2SP signed note), and every entry carries its log index and",
    "an inclusion proof to that root, so an entry cannot be altered, dropped from the",
    "log or replayed without detection.",
    "",
    "An entry of predicateType urn:jobkeeper:predicate:batch:v1 signs a batch of sweep",
    "points at once: one subject per point, named by its job key, with the SHA-256 of",
    "its counts document; 'documents' carries the counts documents of the points the",
    "bundle was made for.",
    "",
    "Keys inside this file prove nothing on their own: obtain the keep's key",
    "fingerprint from its owner by another channel and check it. To verify, with",
    "jobkeeper installed (Python):",
    "    from jobkeeper.provenance import read_bundle, verify_bundle",
    "    report = verify_bundle(read_bundle('THIS FILE'), {'<expected fingerprint>'})",
    "    print(report.ok, report.problems, report.warnings)",
]


@dataclass(frozen=True)
class BundleEntry:
    index: int
    envelope: dict[str, Any]
    inclusion_proof: tuple[bytes, ...]
    record: str | None = None
    #: a batch's entry: job key → counts document (RFC 8785 JSON text) of the points given
    documents: dict[str, str] | None = None


@dataclass(frozen=True)
class Bundle:
    keys: dict[str, bytes]
    checkpoint: str
    entries: tuple[BundleEntry, ...]
    origin: str = ""

    def to_json(self) -> dict[str, Any]:
        b64 = base64.b64encode
        return {
            "format": FORMAT,
            "readme": README,
            "origin": self.origin,
            "keys": {fp: b64(raw).decode("ascii") for fp, raw in sorted(self.keys.items())},
            "checkpoint": self.checkpoint,
            "entries": [
                {
                    "index": e.index,
                    "envelope": copy.deepcopy(e.envelope),  # callers may edit the result
                    "inclusionProof": [b64(h).decode("ascii") for h in e.inclusion_proof],
                    **({} if e.record is None else {"record": e.record}),
                    **({} if e.documents is None else {"documents": dict(e.documents)}),
                }
                for e in self.entries
            ],
        }

    @classmethod
    def from_json(cls, data: Any) -> Bundle:
        """Parse the JSON form; VerificationError names what is malformed."""
        if not isinstance(data, dict) or data.get("format") != FORMAT:
            raise VerificationError(f"not a {FORMAT} document")
        keys_in, note, entries_in = data.get("keys"), data.get("checkpoint"), data.get("entries")
        if (
            not isinstance(keys_in, dict)
            or not isinstance(note, str)
            or not isinstance(entries_in, list)
        ):
            raise VerificationError(
                "bundle needs 'keys' (object), 'checkpoint' (string), 'entries' (list)"
            )
        keys = {str(fp): b64decode_strict(raw, f"key {fp}") for fp, raw in keys_in.items()}
        entries = []
        for i, item in enumerate(entries_in):
            if not isinstance(item, dict):
                raise VerificationError(f"bundle entry {i} is not an object")
            index, envelope, proof = (
                item.get("index"),
                item.get("envelope"),
                item.get("inclusionProof"),
            )
            if isinstance(index, bool) or not isinstance(index, int) or index < 0:
                raise VerificationError(f"bundle entry {i}: index is not a non-negative integer")
            if not isinstance(envelope, dict) or not isinstance(proof, list):
                raise VerificationError(f"bundle entry {i}: needs 'envelope' and 'inclusionProof'")
            hashes = tuple(b64decode_strict(h, f"bundle entry {i} proof") for h in proof)
            record = item.get("record")
            documents = item.get("documents")
            if documents is not None and not (
                isinstance(documents, dict) and all(isinstance(v, str) for v in documents.values())
            ):
                raise VerificationError(f"bundle entry {i}: documents must map names to text")
            entries.append(
                BundleEntry(index, envelope, hashes, record if isinstance(record, str) else None,
                            None if documents is None else {str(k): v for k, v in documents.items()})
            )  # fmt: skip
        origin = data.get("origin", "")
        return cls(keys, note, tuple(entries), origin if isinstance(origin, str) else "")


def make_bundle(
    tree: MerkleTree,
    envelopes: Mapping[int, Mapping[str, Any] | bytes],
    keys: Mapping[str, bytes],
    checkpoint: str,
    records: Mapping[int, str] | None = None,
    documents: Mapping[int, Mapping[str, str]] | None = None,
) -> Bundle:
    """Bundle the envelopes at the given log indexes with proofs to ``checkpoint``.

    ``tree`` is the log's tree (at least as large as the checkpoint); ``envelopes`` maps
    log index → stored envelope (bytes or object); ``records`` names the keep's record id
    of each index (unsigned, for readers); ``documents`` the counts documents of a
    batch entry's points (job key → text). ProvenanceError if an envelope is not
    the one in the tree at its index, or the checkpoint cannot be read.
    """
    try:
        text, _ = split_note(checkpoint)
        cp = parse_checkpoint(text)
    except VerificationError as exc:
        raise ProvenanceError(f"unusable checkpoint: {exc}") from exc
    if cp.size > tree.size or tree.root(cp.size) != cp.root:
        raise ProvenanceError("the checkpoint does not match the given tree")
    entries = []
    for index in sorted(envelopes):
        stored = envelopes[index]
        try:
            obj = (
                strict_json_loads(stored, "envelope") if isinstance(stored, bytes) else dict(stored)
            )
        except VerificationError as exc:
            raise ProvenanceError(f"stored envelope {index} is unreadable: {exc}") from exc
        if not 0 <= index < cp.size:
            raise ProvenanceError(
                f"entry {index} is not covered by the checkpoint (size {cp.size})"
            )
        if leaf_hash(envelope_bytes(obj)) != tree.levels[0][index]:
            raise ProvenanceError(f"envelope given for index {index} is not the logged one")
        proof = tuple(tree.inclusion_proof(index, cp.size))
        docs = (documents or {}).get(index)
        entries.append(BundleEntry(index, obj, proof, (records or {}).get(index),
                                   None if docs is None else dict(docs)))  # fmt: skip
    return Bundle(dict(keys), checkpoint, tuple(entries), cp.origin)


def write_bundle(path: str | os.PathLike[str], bundle: Bundle, *, force: bool = False) -> None:
    """Write the bundle atomically, never over an existing file unless ``force`` (see
    :mod:`jobkeeper.outputs`; the caller refuses paths inside a keep beforehand)."""
    text = json.dumps(bundle.to_json(), indent=1, ensure_ascii=False) + "\n"
    write_output(Path(path), text, force=force)


def read_bundle(path: str | os.PathLike[str]) -> Bundle:
    """Read a bundle file. ProvenanceError if unreadable, VerificationError if malformed."""
    try:
        data = Path(path).read_bytes()
    except OSError as exc:
        raise ProvenanceError(f"cannot read bundle {path}: {exc}") from exc
    return Bundle.from_json(strict_json_loads(data, f"bundle {path}"))


def verify_bundle(
    bundle: Bundle,
    trusted_fingerprints: Iterable[str] | None = None,
    *,
    origin: str | None = None,
) -> VerifyReport:
    """Check every envelope, the checkpoint and every inclusion proof; list all problems.

    With ``trusted_fingerprints``, only those keys are trusted, whatever the bundle says.
    Without, the bundle's own keys are trusted and a warning says the result is
    self-asserted. ``origin``, when given, must be the checkpoint's origin.
    """
    report = VerifyReport()
    keys = check_public_keys(bundle.keys, report)
    if trusted_fingerprints is None:
        trusted = keys
        report.warnings.append(
            "no trusted key fingerprint given: the keys inside the bundle were trusted, so this "
            "only shows the bundle is self-consistent; compare the fingerprint(s) "
            f"{', '.join(sorted(keys)) or '(none)'} with the keep owner's"
        )
    else:
        wanted = {fp.strip().lower() for fp in trusted_fingerprints}
        trusted = {fp: raw for fp, raw in keys.items() if fp in wanted}
        if not trusted:
            report.problems.append("none of the bundle's keys is among the trusted fingerprints")
    cp = _checkpoint(bundle.checkpoint, trusted, origin, report)
    table = key_table(trusted)
    if cp is not None and bundle.origin != cp.origin:
        # The top-level origin is only a label for readers; it must not contradict.
        report.problems.append(
            f"bundle says origin {bundle.origin!r} but its checkpoint is of {cp.origin!r}"
        )
    seen: set[int] = set()
    for n, entry in enumerate(bundle.entries):
        label = f"entry {n} (log index {entry.index})"
        report.checked += 1
        if entry.index in seen:
            report.problems.append(f"{label}: log index appears twice in the bundle")
        seen.add(entry.index)
        points = None if entry.documents is None else {
            key: text.encode("utf-8") for key, text in entry.documents.items()
        }  # fmt: skip
        check_envelope(entry.envelope, table, label, report, points=points, every_point=False)
        if cp is None:
            continue
        try:
            leaf = leaf_hash(envelope_bytes(entry.envelope))
            verify_inclusion(entry.index, cp.size, leaf, entry.inclusion_proof, cp.root)
        except (VerificationError, ProvenanceError) as exc:
            report.problems.append(f"{label}: not in the checkpointed log: {exc}")
    return report


def _checkpoint(
    note: str, trusted: Mapping[str, bytes], origin: str | None, report: VerifyReport
) -> Checkpoint | None:
    try:
        return verify_checkpoint(note, list(trusted.values()), origin=origin)
    except VerificationError as exc:
        report.problems.append(f"checkpoint: {exc}")
    # Still check the proofs against the unverified root so that every problem is listed.
    try:
        return parse_checkpoint(split_note(note)[0])
    except VerificationError:
        return None
