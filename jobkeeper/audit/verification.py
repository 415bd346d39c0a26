"""Verifying a keep's archive, and exporting audit bundles (``verify``, ``bundle``).

The archive is checked as a referee would check it: every envelope's signature against
the keys the log lists (or only the pinned ones), every subject digest against the counts
stored in the results table, every checkpoint's signature and root against the tree
recomputed from the stored entries, consistency between checkpoints, and that each done
job has exactly the log entry its row points to.
"""

from __future__ import annotations

import base64
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

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
from jobkeeper.provenance.log import LogEntry as VerifiableEntry

if TYPE_CHECKING:
    from jobkeeper.keeper import Keeper


def _keys(keeper: Keeper, trusted: Iterable[str] | None, report: VerifyReport) -> dict[str, bytes]:
    listed = {fp: base64.b64decode(key) for fp, key in keeper.store.public_keys().items()}
    if trusted is None:
        return listed
    wanted = {fp.strip().lower() for fp in trusted}
    for fp in sorted(wanted - set(listed)):
        report.problems.append(f"pinned key {fp} is not among the keys this log lists")
    return {fp: raw for fp, raw in listed.items() if fp in wanted}


def verify_jobs(
    keeper: Keeper, ids: Sequence[str] | None = None, *, trusted: Iterable[str] | None = None
) -> VerifyReport:
    """Verify the whole log and the named jobs (all done jobs when ``ids`` is None)."""
    store = keeper.store
    pre = VerifyReport()
    keys = _keys(keeper, trusted, pre)
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
    report = verify_log(verifiable, notes, keys, origin=store.get_meta("origin"))
    report.problems[:0] = pre.problems
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


def export_bundle(keeper: Keeper, ids: Sequence[str], path: Path) -> int:
    """Write an audit bundle of the given done jobs to ``path``; returns how many."""
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
    bundle = make_bundle(tree, chosen, keys, latest.note)
    write_bundle(path, bundle)
    return len(chosen)


def verify_bundle_file(path: Path, *, trusted: Iterable[str] | None = None) -> VerifyReport:
    try:
        bundle = read_bundle(path)
    except (ProvenanceError, VerificationError) as exc:
        report = VerifyReport()
        report.problems.append(str(exc))
        return report
    return verify_bundle(bundle, trusted)


__all__ = ["export_bundle", "verify_bundle_file", "verify_jobs"]
