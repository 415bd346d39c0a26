"""Verifying a keep's archive, and exporting audit bundles (``verify``, ``bundle``).

The archive is checked as a referee would check it: every envelope's signature (and then
whether its signer is one the keep trusts, :mod:`jobkeeper.audit.trust`, never merely
one the archive lists; or only the pinned keys), every subject digest against the counts
stored in the results table, every checkpoint's signature and root against the tree
recomputed from the stored entries, consistency between checkpoints, and that each done
job has exactly the log entry its row points to.
"""

from __future__ import annotations

import base64
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING

from jobkeeper.audit import trust
from jobkeeper.audit.mirror import check_mirrors
from jobkeeper.audit.sealing import log_state_of
from jobkeeper.audit.trust import TrustSet
from jobkeeper.audit.witness import (
    Anchor,
    check_extends,
    latest_checkpoint,
    read_anchor,
    read_witness,
    write_witness,
)
from jobkeeper.exceptions import JobkeeperError, ProvenanceError, VerificationError
from jobkeeper.provenance import (
    MerkleTree,
    VerifyReport,
    make_bundle,
    read_bundle,
    verify_bundle,
    verify_log,
    write_bundle,
)
from jobkeeper.provenance.checkpoint import parse_checkpoint, split_note, verify_checkpoint
from jobkeeper.provenance.dsse import key_table, verify_envelope_detailed
from jobkeeper.provenance.log import LogEntry as VerifiableEntry
from jobkeeper.provenance.log import check_public_keys
from jobkeeper.provenance.merkle import leaf_hash
from jobkeeper.provenance.trusted import check_fingerprint

if TYPE_CHECKING:
    from jobkeeper.store import LogEntry as StoredEntry
    from jobkeeper.store import Store, StoredCheckpoint


def _pin(base: TrustSet, pinned: Iterable[str], listed: Mapping[str, bytes]) -> TrustSet:
    fps = [check_fingerprint(fp) for fp in pinned]
    return base.pinned(fps, listed)


def check_signers(
    report: VerifyReport,
    signed: Sequence[tuple[int, Sequence[str]]],
    notes: Sequence[str],
    all_keys: Mapping[str, bytes],
    trusted: TrustSet,
    *,
    origin: str | None,
    hint: Callable[[str], str],
) -> None:
    """The trust pass: every entry (log index, fingerprints whose signature held) and
    every checkpoint must be signed by a trusted key, and no retired key may sign after
    its successor took over. Integrity is checked elsewhere; here only who signed."""
    untrusted: dict[str, list[int]] = {}
    for index, signers in signed:
        if not signers:
            continue  # its signature did not hold: already a problem of integrity
        good = [fp for fp in signers if fp in trusted.keys]
        if not good:
            for fp in signers:
                untrusted.setdefault(fp, []).append(index)
            continue
        late = trusted.retirement_problem(good, index)
        if late:
            report.problems.append(f"log index {index}: {late}")
    for fp, indexes in sorted(untrusted.items()):
        shown = ", ".join(map(str, indexes[:8])) + (", …" if len(indexes) > 8 else "")
        report.untrusted_signers.append(fp)
        report.trust_problems.append(
            f"{len(indexes)} entr{'y' if len(indexes) == 1 else 'ies'} (log index {shown}) "
            f"signed by key {fp}, which is not trusted here; to trust it: {hint(fp)}"
        )
    current = [raw for fp, raw in trusted.keys.items() if fp not in trusted.retired_from]
    for j, note in enumerate(notes):
        try:
            verify_checkpoint(note, current, origin=origin)
            continue  # the usual case: one more signature check per checkpoint
        except VerificationError:
            pass
        late = _retired_signer(note, trusted, origin)
        if late is not None:
            if late:
                report.problems.append(f"checkpoint {j}: {late}")
            continue
        try:
            verify_checkpoint(note, list(all_keys.values()), origin=origin)
        except VerificationError:
            continue  # an integrity problem, reported by the integrity pass
        report.trust_problems.append(f"checkpoint {j} is signed by no key trusted here")


def _retired_signer(note: str, trusted: TrustSet, origin: str | None) -> str | None:
    """None when no retired key signed the checkpoint; else "" when it signed within its
    time, or the problem when it signed a checkpoint covering entries of its successor."""
    for fp, start in trusted.retired_from.items():
        raw = trusted.keys.get(fp)
        if raw is None:
            continue
        try:
            cp = verify_checkpoint(note, [raw], origin=origin)
        except VerificationError:
            continue
        if cp.size <= start:
            return ""
        return (
            f"size {cp.size}, signed by retired key {fp} after its retirement: its "
            f"successor signs from log index {start}"
        )
    return None


def _finish(report: VerifyReport, integrity_only: bool, what: str) -> None:
    if integrity_only:
        report.integrity_only = True
        report.warnings.append(
            f"--integrity-only: signatures, digests and the log were checked against the "
            f"keys {what} carries, but not whether those keys are trusted"
        )


def verify_archive(
    store: Store,
    trust_set: TrustSet,
    ids: Sequence[str] | None = None,
    *,
    trusted: Iterable[str] | None = None,
    integrity_only: bool = False,
    witness: Path | None = None,
    since: Sequence[Path] = (),
) -> VerifyReport:
    """Verify the whole log and the named jobs (all done jobs when ``ids`` is None).

    Signers are checked against ``trust_set`` (the keep's own keys and those its owner
    trusted), or only the ``trusted`` fingerprints when given (a one-off ``--key``). The
    log must extend the keep's ``witness`` file and every checkpoint in ``since`` (a
    bundle, witness or checkpoint held elsewhere); a keep with no witness gets one here."""
    pre = VerifyReport()
    listed = {fp: base64.b64decode(key) for fp, key in store.public_keys().items()}
    if trusted is not None:
        trust_set = _pin(trust_set, trusted, listed)
        for fp in sorted(set(map(check_fingerprint, trusted)) - set(trust_set.keys)):
            pre.problems.append(f"pinned key {fp} is not among the keys this log lists")
    # Integrity is checked with every key at hand (our own copy wins); trust apart.
    keys = {**listed, **trust_set.keys}
    anchors = [read_anchor(path) for path in since]  # an unreadable file: exit before work
    entries = store.log_entries()
    stored_counts = store.all_counts()
    reports = {c.id: c.report for c in store.comparisons()}
    done_keys = store.job_keys("done")
    members = store.batch_members()
    verifiable = []
    for entry in entries:
        if entry.job_id in members:
            points = _batch_documents(entry, members[entry.job_id], done_keys, stored_counts, pre)
            verifiable.append(VerifiableEntry(entry.envelope, entry.signer, points=points))
            continue
        # The stored subject document, byte for byte: a change that leaves the numbers
        # equal (spacing, member order) is still a change to the archive.
        if entry.job_id in reports:
            document: bytes | None = reports[entry.job_id].encode()
        elif entry.job_id in stored_counts:
            document = (stored_counts[entry.job_id] or "{}").encode()
        else:
            pre.problems.append(f"entry {entry.index}: {entry.job_id[:12]} has no stored result")
            document = None
        key = None if entry.job_id in reports else done_keys.get(entry.job_id)
        if key is None and entry.job_id not in reports:
            pre.problems.append(f"entry {entry.index}: job {entry.job_id[:12]} is not done")
        verifiable.append(
            VerifiableEntry(entry.envelope, entry.signer, document=document, job_key=key)
        )
    stored = store.checkpoints()
    notes = [cp.note for cp in stored]
    origin = store.get_meta("origin")
    report = verify_log(verifiable, notes, keys, origin=origin)
    report.problems[:0] = pre.problems
    report.warnings[:0] = pre.warnings
    tree = check_log_state(store, entries, stored, report)
    latest = latest_checkpoint(notes[-1:], keys)
    found = _witness(witness, report)
    for anchor in ([found] if found is not None else []) + anchors:
        check_extends(anchor, tree, latest, list(keys.values()), origin, report)
    if integrity_only:
        _finish(report, True, "the archive")
    else:
        check_signers(
            report, [(e.index, [e.signer]) for e in entries], notes, keys, trust_set,
            origin=origin, hint=trust.trust_command,
        )  # fmt: skip
    logged = _covered(entries, members, report)
    wanted = (
        done_keys if ids is None else {job.id: job.job_key for job in store.get_many(list(ids))}
    )
    check_mirrors(store, entries, None if ids is None else wanted, report)
    for job_id in wanted:
        if job_id in done_keys and job_id not in logged:
            report.problems.append(f"job {job_id[:12]} is done but has no log entry")
    if ids is not None:
        report.checked = len(wanted)
    if not entries and ids is None:
        report.warnings.append("the log is empty: no done job to verify")
    if witness is not None and report.ok and notes:
        _advance_witness(witness, notes[-1], found is None, report)
    return report


def _batch_documents(
    entry: StoredEntry, jobs: Sequence[str], done_keys: Mapping[str, str],
    stored_counts: Mapping[str, str | None], report: VerifyReport,
) -> dict[str, bytes]:  # fmt: skip
    """Each point of a batch entry: its job key → its stored counts document."""
    points: dict[str, bytes] = {}
    for job_id in jobs:
        key = done_keys.get(job_id)
        if key is None:
            report.problems.append(f"entry {entry.index}: its point job {job_id[:12]} is not done")
        elif stored_counts.get(job_id) is None:
            report.problems.append(
                f"entry {entry.index}: its point job {job_id[:12]} has no stored counts"
            )
        else:
            points[key] = str(stored_counts[job_id]).encode()
    return points


def _covered(
    entries: Sequence[StoredEntry], members: Mapping[str, Sequence[str]], report: VerifyReport
) -> set[str]:
    """The jobs the log's entries sign (their own entry, or their batch's); a job signed
    by two statements is a problem: every job has exactly one."""
    seen: dict[str, int] = {}
    for entry in entries:
        for job_id in members.get(entry.job_id, (entry.job_id,)):
            if job_id in seen:
                report.problems.append(
                    f"job {job_id[:12]} is signed by two log entries ({seen[job_id]} and "
                    f"{entry.index}): each job has exactly one signed statement"
                )
            seen[job_id] = entry.index
    logged = {entry.job_id for entry in entries}
    for batch_id in sorted(set(members) - logged):
        report.problems.append(f"batch {batch_id[:12]} lists points but has no log entry")
    return set(seen)


def require_ok(report: VerifyReport, what: str) -> None:
    """VerificationError (exit 1) unless the report is clean: commands that hand data on
    (bundle, export) never hand on what does not verify."""
    if not report.ok:
        found = [*report.problems, *report.trust_problems]
        raise VerificationError(
            f"{what}: the archive does not verify ({len(found)} problem(s)): "
            + "; ".join(found[:3])
            + ("; …" if len(found) > 3 else "")
            + " (see jobkeeper verify --all)"
        )


def _witness(path: Path | None, report: VerifyReport) -> Anchor | None:
    if path is None:
        return None
    try:
        return read_witness(path)
    except VerificationError as exc:
        report.problems.append(str(exc))
        return None


def _advance_witness(path: Path, note: str, first: bool, report: VerifyReport) -> None:
    """After a clean verify, the witness moves up to the archive's latest checkpoint (a
    keep made before witnesses gets its first one, and is told)."""
    try:
        write_witness(path, note)
    except (OSError, ProvenanceError) as exc:
        if first:
            report.warnings.append(f"no witness could be written at {path}: {exc}")
        return
    if first:
        report.warnings.append(
            f"this keep had no witness of its log: one is written now ({path}); from now on "
            "verify proves the log extends it, but a rollback before today cannot be seen "
            "here (only from a bundle or checkpoint held elsewhere: verify --since FILE)"
        )


def check_log_state(
    store: Store,
    entries: Sequence[StoredEntry],
    checkpoints: Sequence[StoredCheckpoint],
    report: VerifyReport,
) -> MerkleTree:
    """What the archive keeps beside the entries must be what they give: each stored
    leaf hash, each checkpoint row's size and root, and the saved log state the next
    append starts from. Returns the tree of the entries."""
    leaves = []
    for position, entry in enumerate(entries):
        leaf = leaf_hash(entry.envelope)
        leaves.append(leaf)
        if entry.index != position:
            report.problems.append(
                f"log index {entry.index} stands at position {position}: an entry is missing"
            )
        if entry.leaf_hash != leaf:
            report.problems.append(
                f"log index {entry.index}: its stored leaf hash is not the hash of its envelope"
            )
    tree = MerkleTree(leaves)
    for cp in checkpoints:
        try:
            said = parse_checkpoint(split_note(cp.note)[0])
        except VerificationError:
            continue  # the note itself is reported by the log check
        if (said.size, said.root) != (cp.size, cp.root):
            report.problems.append(
                f"checkpoint row of size {cp.size}: its size or root column differs from "
                "its signed note"
            )
    state = store.log_state()
    if state is None:
        if leaves:
            report.problems.append("the saved log state is missing: the log has entries")
    elif state != (len(leaves), log_state_of(leaves)):
        report.problems.append(
            f"the saved log state (size {state[0]}) is not the one the {len(leaves)} entries "
            "give: the next entry would be appended to a wrong tree"
        )
    return tree


def export_bundle(store: Store, ids: Sequence[str], path: Path, *, force: bool = False) -> int:
    """Write an audit bundle of the given done jobs to ``path`` (never over an existing
    file unless ``force``); returns how many. The caller verifies the archive first
    (:func:`verify_archive`)."""
    entries = store.log_entries()
    checkpoints = store.checkpoints()
    if not checkpoints:
        raise JobkeeperError("the log has no checkpoint yet: no done job to bundle")
    tree = MerkleTree(entry.leaf_hash for entry in entries)
    wanted = set(ids)
    batch_of = {job: batch for batch, jobs in store.batch_members().items() for job in jobs}
    by_subject = {e.job_id: e for e in entries}
    chosen: dict[int, bytes] = {}
    records: dict[int, str] = {}
    documents: dict[int, dict[str, str]] = {}
    stored_counts: dict[str, str | None] | None = None
    missing = []
    for job_id in sorted(wanted):
        if job_id in by_subject:
            entry = by_subject[job_id]
            records[entry.index] = job_id
        elif batch_of.get(job_id) in by_subject:
            # A batch point: the batch's envelope, and this point's counts document only.
            entry = by_subject[batch_of[job_id]]
            [job] = store.get_many([job_id])
            if stored_counts is None:
                stored_counts = store.all_counts()  # the documents exactly as stored
            counts = stored_counts.get(job_id)
            if counts is None:
                missing.append(job_id)
                continue
            documents.setdefault(entry.index, {})[job.job_key] = counts
            records[entry.index] = job_id if entry.index not in records else "several points"
        else:
            missing.append(job_id)
            continue
        chosen[entry.index] = entry.envelope
    if missing:
        raise JobkeeperError(
            f"{len(missing)} job(s) have no log entry (not done): "
            + ", ".join(sorted(m[:12] for m in missing))
        )
    keys = {fp: base64.b64decode(key) for fp, key in store.public_keys().items()}
    latest = checkpoints[-1]
    bundle = make_bundle(tree, chosen, keys, latest.note, records, documents)
    write_bundle(path, bundle, force=force)
    return len(chosen)


def verify_bundle_file(
    path: Path,
    *,
    trusted: Iterable[str] | None = None,
    trust_set: TrustSet | None = None,
    integrity_only: bool = False,
) -> VerifyReport:
    """Verify a bundle: its integrity with the keys it carries, then its signers against
    ``trust_set`` (a keep's trusted keys) or the pinned ``trusted`` fingerprints (which win).
    With neither, no signer can be trusted: the report fails with ``signer_trusted`` false."""
    try:
        bundle = read_bundle(path)
    except (ProvenanceError, VerificationError) as exc:
        report = VerifyReport()
        report.problems.append(str(exc))
        return report
    base = trust_set if trust_set is not None else TrustSet()
    chosen = base if trusted is None else _pin(base, trusted, bundle.keys)
    merged = replace(bundle, keys={**bundle.keys, **chosen.keys})
    # Every key at hand, so that the integrity pass never warns of self-asserted keys.
    report = verify_bundle(merged, list(merged.keys))
    if not bundle.entries:
        report.problems.append("the bundle holds no entries: it attests nothing")
    if integrity_only:
        _finish(report, True, "the bundle")
        return report
    table = key_table(check_public_keys(merged.keys, VerifyReport()))
    signed = []
    for entry in bundle.entries:
        try:
            signers = list(verify_envelope_detailed(entry.envelope, table).signers)
        except VerificationError:
            signers = []
        signed.append((entry.index, signers))
    hint = trust.trust_command if trusted is None and trust_set is not None else _no_keep_hint(path)
    check_signers(report, signed, [bundle.checkpoint], merged.keys, chosen, origin=None, hint=hint)
    if trusted is None and trust_set is None:
        report.warnings.append(
            "no keep at hand and no --key given: no signer can be trusted; get the signing "
            "key's fingerprint from its owner by another channel and pass it with --key"
        )
    return report


def _no_keep_hint(path: Path) -> Callable[[str], str]:
    return lambda fp: (
        f"check {fp} with its owner, then: jobkeeper verify {path} --key {fp} "
        f"(or, in a keep, {trust.trust_command(fp)})"
    )


__all__ = [
    "check_log_state",
    "check_signers",
    "export_bundle",
    "require_ok",
    "verify_archive",
    "verify_bundle_file",
]
