"""The JSON shapes of archived records that the command line's ``--json`` prints and the
web view's ``/api`` serves: one definition, so the two cannot drift apart. Plain values
only (snake_case keys, times as RFC 3339 UTC)."""

from __future__ import annotations

import datetime as dt
import json
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from jobkeeper.job import Job
    from jobkeeper.keeper import Keeper
    from jobkeeper.store import JobRecord


def when(seconds: float | None) -> str:
    if seconds is None:
        return "-"
    return dt.datetime.fromtimestamp(seconds, tz=dt.UTC).strftime("%Y-%m-%d %H:%M:%S UTC")


def when_iso(seconds: float | None) -> str | None:
    if seconds is None:
        return None
    return dt.datetime.fromtimestamp(seconds, tz=dt.UTC).isoformat().replace("+00:00", "Z")


def job_json(job: JobRecord) -> dict[str, Any]:
    spec = job.spec
    return {
        "id": job.id,
        "job_key": job.job_key,
        "state": job.state,
        "backend": spec.backend,
        "shots": spec.shots,
        # The seed the job runs with (resolved at submission, the one its manifest signs),
        # and the one asked for (None: chosen by jobkeeper).
        "seed": spec.seed,
        "requested_seed": spec.requested_seed,
        "repeat": spec.repeat,
        "labels": list(job.labels),
        "circuit_hash": spec.circuit_hash,
        "source": spec.source_name,
        "created_at": when_iso(job.created_at),
        "started_at": when_iso(job.started_at),
        "finished_at": when_iso(job.finished_at),
        "attempts": job.attempts,
        "error": job.error,
        "cost": job.cost,
        "remote_handle": job.handle,
    }


def job_details(keeper: Keeper, job: Job) -> dict[str, Any]:
    """Everything about one job (what ``jobkeeper show --json`` prints): what ran, where,
    when, attempts, result, comparisons, and its verification, computed now."""
    record = job.record
    spec = job.spec
    data = job_json(record)
    data["circuit"] = spec.circuit_text
    data["source_hash"] = spec.source_hash
    data["code_version"] = None if spec.code_version is None else dict(spec.code_version)
    data["options"] = dict(spec.options)
    data["attempt_history"] = [
        {
            "number": a.number,
            "at": when(a.at),
            "error_class": a.error_class,
            "message": a.message,
            "in_call": a.in_call,
        }
        for a in job.attempts
    ]
    result = job.result
    if result is not None:
        data["counts"] = None if result.counts is None else dict(result.counts)
        data["probabilities"] = None if result.probabilities is None else dict(result.probabilities)
        data["result_metadata"] = dict(result.metadata)
    data["rerun_of"] = spec.rerun_of
    data["comparisons"] = [
        {"id": c.id, "kind": c.kind, "job_a": c.job_a, "job_b": c.job_b, "verdict": c.verdict,
         "result": json.loads(c.report).get("result", {})}
        for c in job.comparisons
    ]  # fmt: skip
    entry = job.log_entry
    if entry is not None:
        data["envelope"] = json.loads(entry.envelope)
        data["log_index"] = entry.index
        data["signer"] = entry.signer
        report = keeper.verify([record.id])
        data["verification"] = {"ok": report.ok, "problems": list(report.problems)}
    return data


__all__ = ["job_details", "job_json", "when", "when_iso"]
