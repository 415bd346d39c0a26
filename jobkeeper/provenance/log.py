"""Sealing runs into log entries, and verifying a whole log with its checkpoints.

The log leaf of an entry is the exact stored envelope bytes (RFC 8785 canonical JSON of
the envelope, see ``envelope_bytes``): any change to a stored envelope, even to its
unsigned ``keyid`` hint, changes the leaf and so the tree root every later checkpoint
signed. Signatures alone cannot catch an entry re-signed by someone holding the key, or a
deleted, reordered or duplicated entry; the checkpoint roots do.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

from jobkeeper.exceptions import ProvenanceError, VerificationError
from jobkeeper.provenance.batch import BATCH_PREDICATE_TYPE, check_batch_documents
from jobkeeper.provenance.checkpoint import Checkpoint, verify_checkpoint
from jobkeeper.provenance.dsse import (
    PAYLOAD_TYPE,
    KeyTable,
    envelope_bytes,
    key_table,
    sign_envelope,
    verify_envelope_detailed,
)
from jobkeeper.provenance.keys import fingerprint, load_public_key
from jobkeeper.provenance.manifest import (
    COMPARISON_NAME,
    COUNTS_NAME,
    PREDICATE_TYPES,
    RUN_PREDICATE_TYPES,
    RunPredicate,
    build_statement,
    check_layout,
    check_subject,
    check_subject_document,
    parse_statement,
    statement_bytes,
)
from jobkeeper.provenance.merkle import MerkleTree, leaf_hash, verify_consistency
from jobkeeper.provenance.report import VerifyReport


@dataclass(frozen=True)
class SealedRun:
    """Everything the store keeps for one sealed run."""

    statement: bytes  # the signed payload (canonical JSON of the Statement)
    envelope: dict[str, Any]
    envelope_bytes: bytes  # store exactly these; they are the log leaf
    leaf_hash: bytes
    signer: str  # fingerprint of the signing key


def seal_run(
    counts: Mapping[str, int],
    predicate: Mapping[str, Any] | RunPredicate,
    signing_key: Ed25519PrivateKey,
) -> SealedRun:
    """Manifest → canonical bytes → DSSE envelope → leaf. ProvenanceError on bad input."""
    payload = statement_bytes(build_statement(counts, predicate))
    envelope = sign_envelope(payload, PAYLOAD_TYPE, signing_key)
    stored = envelope_bytes(envelope)
    return SealedRun(payload, envelope, stored, leaf_hash(stored), fingerprint(signing_key))


@dataclass(frozen=True)
class LogEntry:
    """One stored log entry as the verifier receives it."""

    envelope: bytes  # stored envelope bytes (the leaf)
    signer: str  # fingerprint recorded as the signer
    counts: Mapping[str, int] | None = None  # stored counts, if kept apart
    # The stored subject document itself (the counts document of a run, the report of a
    # comparison): when given, its exact bytes must have the subject's digest.
    document: bytes | None = None
    # The job key the archive's row holds for this entry's job, when it is a run.
    job_key: str | None = None
    # A batch's entry: each point's stored counts document by its job key (every point
    # the archive lists with the batch).
    points: Mapping[str, bytes] | None = None


def check_public_keys(keys: Mapping[str, bytes], report: VerifyReport) -> dict[str, bytes]:
    """The keys whose fingerprint matches; a problem for each one that does not."""
    good: dict[str, bytes] = {}
    for fp, raw in keys.items():
        try:
            load_public_key(raw)
            if fingerprint(raw) != fp:
                raise VerificationError("the fingerprint is not the SHA-256 of the key")
        except (VerificationError, ProvenanceError) as exc:
            report.problems.append(f"public key {fp}: {exc}")
            continue
        good[fp] = raw
    return good


def check_envelope(
    envelope: Mapping[str, Any] | bytes,
    keys: Mapping[str, bytes] | KeyTable,
    label: str,
    report: VerifyReport,
    *,
    signer: str | None = None,
    counts: Mapping[str, int] | None = None,
    document: bytes | None = None,
    job_key: str | None = None,
    points: Mapping[str, bytes] | None = None,
    every_point: bool = True,
) -> bool:
    """Signature, statement shape and subject digest of one envelope; problems appended.
    ``document`` is the stored subject document (counts or comparison report), checked
    byte for byte; without it, ``counts`` (or the predicate's own counts) are checked.
    A batch's envelope is checked against ``points`` (job key → counts document): with
    ``every_point``, they must be exactly the points it attests (an archive), else any of
    them (a bundle carries the points it was asked for)."""
    try:
        verified = verify_envelope_detailed(envelope, keys)
    except VerificationError as exc:
        report.problems.append(f"{label}: {exc}")
        return False
    ok = True
    if signer is not None and signer not in verified.signers:
        report.problems.append(
            f"{label}: recorded signer {signer[:16]} did not sign it "
            f"(signed by {', '.join(s[:16] for s in verified.signers)})"
        )
        ok = False
    try:
        statement = parse_statement(
            verified.payload, predicate_types=(*PREDICATE_TYPES, BATCH_PREDICATE_TYPE)
        )
        if statement["predicateType"] == BATCH_PREDICATE_TYPE:
            if job_key is not None or document is not None:
                raise VerificationError("a batch's statement stands where one job's should")
            check_batch_documents(statement, points or {}, every=every_point)
            return ok
        is_run = statement["predicateType"] in RUN_PREDICATE_TYPES
        if job_key is not None and (not is_run or statement["predicate"].get("jobKey") != job_key):
            raise VerificationError("it attests another job key than the archive's job has")
        if document is not None:
            check_subject_document(statement, COUNTS_NAME if is_run else COMPARISON_NAME, document)
        elif is_run:
            if counts is None:
                counts = statement["predicate"].get("counts")
            if counts is not None:
                check_subject(statement, counts)
        if is_run:
            # the keys' layout fits the signed circuit (and the keys of the signed counts)
            check_layout(statement, statement["predicate"].get("counts") or {})
    except VerificationError as exc:
        report.problems.append(f"{label}: {exc}")
        ok = False
    return ok


def verify_log(
    entries: Sequence[LogEntry],
    checkpoints: Sequence[str],
    keys: Mapping[str, bytes],
    *,
    origin: str | None = None,
) -> VerifyReport:
    """Verify a whole log: every envelope, every checkpoint, and how they fit together.

    ``entries`` in log order; ``checkpoints`` signed checkpoint notes in the order they
    were issued; ``keys`` fingerprint → raw public key of every key the log has used.
    Never raises for a bad log: each finding is a problem in the report.
    """
    report = VerifyReport()
    good_keys = check_public_keys(keys, report)
    table = key_table(good_keys)
    tree = MerkleTree()
    seen: dict[bytes, int] = {}
    for i, entry in enumerate(entries):
        leaf = leaf_hash(entry.envelope)
        tree.append(leaf)
        if leaf in seen:
            report.problems.append(f"entry {i}: duplicates entry {seen[leaf]}")
        else:
            seen[leaf] = i
        if entry.signer not in good_keys:
            report.problems.append(f"entry {i}: signer {entry.signer[:16]} is not a listed key")
        check_envelope(
            entry.envelope,
            table,
            f"entry {i}",
            report,
            signer=entry.signer,
            counts=entry.counts,
            document=entry.document,
            job_key=entry.job_key,
            points=entry.points,
        )
        report.checked += 1
    _check_checkpoints(tree, checkpoints, list(good_keys.values()), origin, report)
    return report


def _check_checkpoints(
    tree: MerkleTree,
    notes: Sequence[str],
    public_keys: list[bytes],
    origin: str | None,
    report: VerifyReport,
) -> None:
    previous: tuple[int, Checkpoint] | None = None
    previous_matched = False
    matched = 0  # the largest checkpoint size whose root agrees with the entries
    for j, note in enumerate(notes):
        label = f"checkpoint {j}"
        try:
            cp = verify_checkpoint(note, public_keys, origin=origin)
        except VerificationError as exc:
            report.problems.append(f"{label}: {exc}")
            continue
        origin = cp.origin  # the first good checkpoint fixes the origin for the rest
        label = f"checkpoint {j} (size {cp.size})"
        root_matches = False
        if cp.size > tree.size:
            report.problems.append(
                f"{label}: the log holds only {tree.size} entries; entries were removed"
            )
        elif tree.root(cp.size) != cp.root:
            report.problems.append(
                f"{label}: root does not match the stored entries; an entry in "
                f"{min(matched, cp.size)}..{cp.size - 1} was changed, removed, inserted or moved"
            )
        else:
            matched = max(matched, cp.size)
            root_matches = True
        _check_link(label, cp, previous[1] if previous is not None else None, report)
        if previous is not None:
            _check_pair(tree, previous, (j, cp), report, previous_matched and root_matches)
        previous, previous_matched = (j, cp), root_matches
    # Each append commits its checkpoint in the same transaction: an entry no checkpoint
    # covers was added behind the log's back, or its checkpoint was deleted.
    if previous is None:
        if tree.size:
            report.problems.append(
                "no valid signed checkpoint: every checkpoint was removed or damaged, and "
                "the order of the entries is unproven"
            )
    elif previous[1].size < tree.size:
        report.problems.append(
            f"entries {previous[1].size}..{tree.size - 1} are covered by no signed "
            "checkpoint: a checkpoint was removed or entries were added"
        )


def _check_link(
    label: str, cp: Checkpoint, before: Checkpoint | None, report: VerifyReport
) -> None:
    """A checkpoint that names the size of the one before it (``previous N``) must
    follow exactly that one: otherwise a checkpoint between them was removed."""
    said = cp.previous_size
    had = 0 if before is None else before.size
    if said is not None and said != had:
        report.problems.append(
            f"{label}: follows the checkpoint of size {said}, but the one before it "
            f"{'is missing' if before is None else f'has size {had}'}: a checkpoint was removed"
        )


def _check_pair(
    tree: MerkleTree,
    first: tuple[int, Checkpoint],
    second: tuple[int, Checkpoint],
    report: VerifyReport,
    prove: bool,
) -> None:
    """Order and consistency of two successive checkpoints.

    Regressions and forks are reported whatever the entries say. The consistency proof is
    built from the stored entries, so it is checked only when both roots matched them
    (a mismatch is already reported, and a proof from altered entries proves nothing);
    it then cross-checks the tree code against RFC 9162 §2.1.4.2 verification.
    """
    (i, a), (j, b) = first, second
    if b.size < a.size:
        report.problems.append(
            f"checkpoint {j}: size went back from {a.size} (checkpoint {i}) to {b.size}"
        )
        return
    if b.size == a.size:
        if a.root != b.root:
            report.problems.append(
                f"checkpoints {i} and {j}: two different roots signed for size {a.size}"
                f" ({a.root.hex()[:16]}…, {b.root.hex()[:16]}…)"
            )
        return
    if not prove or a.size == 0:
        return  # nothing to prove from the empty tree
    try:
        verify_consistency(a.size, b.size, a.root, b.root, tree.consistency_proof(a.size, b.size))
    except VerificationError as exc:
        report.problems.append(f"checkpoints {i} → {j}: not consistent: {exc}")
