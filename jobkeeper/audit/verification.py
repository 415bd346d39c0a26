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
from jobkeeper.audit.trust import TrustSet
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
from jobkeeper.provenance.checkpoint import verify_checkpoint
from jobkeeper.provenance.dsse import key_table, verify_envelope_detailed
from jobkeeper.provenance.log import LogEntry as VerifiableEntry
from jobkeeper.provenance.log import check_public_keys
from jobkeeper.provenance.trusted import check_fingerprint

if TYPE_CHECKING:
    from jobkeeper.keeper import Keeper


def _trust(keeper: Keeper, report: VerifyReport) -> TrustSet:
    notice = trust.first_use_notice(keeper.path, keeper.keyring, keeper.store.public_keys())
    if notice:
        report.warnings.append(notice)
    return trust.load_trust(keeper.path, keeper.keyring)


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
    trusted_raw = list(trusted.keys.values())
    for j, note in enumerate(notes):
        try:
            verify_checkpoint(note, trusted_raw, origin=origin)
            continue  # the usual case: one more signature check per checkpoint
        except VerificationError:
            pass
        try:
            verify_checkpoint(note, list(all_keys.values()), origin=origin)
        except VerificationError:
            continue  # an integrity problem, reported by the integrity pass
        report.trust_problems.append(f"checkpoint {j} is signed by no key trusted here")


def _finish(report: VerifyReport, integrity_only: bool, what: str) -> None:
    if integrity_only:
        report.integrity_only = True
        report.warnings.append(
            f"--integrity-only: signatures, digests and the log were checked against the "
            f"keys {what} carries, but not whether those keys are trusted"
        )


def verify_jobs(
    keeper: Keeper,
    ids: Sequence[str] | None = None,
    *,
    trusted: Iterable[str] | None = None,
    integrity_only: bool = False,
) -> VerifyReport:
    """Verify the whole log and the named jobs (all done jobs when ``ids`` is None).

    Signers are checked against the keep's trusted keys (its own and those its owner
    trusted), or only the ``trusted`` fingerprints when given (a one-off ``--key``)."""
    store = keeper.store
    pre = VerifyReport()
    listed = {fp: base64.b64decode(key) for fp, key in store.public_keys().items()}
    trust_set = _trust(keeper, pre)
    if trusted is not None:
        trust_set = _pin(trust_set, trusted, listed)
        for fp in sorted(set(map(check_fingerprint, trusted)) - set(trust_set.keys)):
            pre.problems.append(f"pinned key {fp} is not among the keys this log lists")
    # Integrity is checked with every key at hand (our own copy wins); trust apart.
    keys = {**listed, **trust_set.keys}
    entries = store.log_entries()
    stored_counts = store.all_counts()
    reports = {c.id: c.report for c in store.comparisons()}
    done_keys = store.job_keys("done")
    verifiable = []
    for entry in entries:
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
    notes = [cp.note for cp in store.checkpoints()]
    origin = store.get_meta("origin")
    report = verify_log(verifiable, notes, keys, origin=origin)
    report.problems[:0] = pre.problems
    report.warnings[:0] = pre.warnings
    if integrity_only:
        _finish(report, True, "the archive")
    else:
        check_signers(
            report, [(e.index, [e.signer]) for e in entries], notes, keys, trust_set,
            origin=origin, hint=trust.trust_command,
        )  # fmt: skip
    logged = {entry.job_id for entry in entries}
    wanted = (
        done_keys if ids is None else {job.id: job.job_key for job in store.get_many(list(ids))}
    )
    for job_id in wanted:
        if job_id in done_keys and job_id not in logged:
            report.problems.append(f"job {job_id[:12]} is done but has no log entry")
    if ids is not None:
        report.checked = len(wanted)
    if not entries and ids is None:
        report.warnings.append("the log is empty: no done job to verify")
    return report


def export_bundle(keeper: Keeper, ids: Sequence[str], path: Path, *, force: bool = False) -> int:
    """Write an audit bundle of the given done jobs to ``path`` (never over an existing
    file unless ``force``); returns how many."""
    store = keeper.store
    entries = store.log_entries()
    checkpoints = store.checkpoints()
    if not checkpoints:
        raise JobkeeperError("the log has no checkpoint yet: no done job to bundle")
    tree = MerkleTree(entry.leaf_hash for entry in entries)
    wanted = set(ids)
    chosen = {e.index: e.envelope for e in entries if e.job_id in wanted}
    missing = wanted - {e.job_id for e in entries if e.job_id in wanted}
    if missing:
        raise JobkeeperError(
            f"{len(missing)} job(s) have no log entry (not done): "
            + ", ".join(sorted(m[:12] for m in missing))
        )
    keys = {fp: base64.b64decode(key) for fp, key in store.public_keys().items()}
    latest = checkpoints[-1]
    records = {e.index: e.job_id for e in entries if e.job_id in wanted}
    bundle = make_bundle(tree, chosen, keys, latest.note, records)
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


__all__ = ["check_signers", "export_bundle", "verify_bundle_file", "verify_jobs"]
