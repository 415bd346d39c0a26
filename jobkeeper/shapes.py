"""The JSON shapes of archived records that the command line's ``--json`` prints and the
web view's ``/api`` serves: one definition, so the two cannot drift apart. Plain values
only (snake_case keys, times as RFC 3339 UTC)."""

from __future__ import annotations

import datetime as dt
import json
import math
import re
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from jobkeeper.job import Job
    from jobkeeper.keeper import Keeper
    from jobkeeper.store import ComparisonRecord, JobRecord


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
        # Input name → number, for a circuit bound from a program with inputs.
        "bindings": spec.bindings_json(),
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
        data["count_keys"] = job.registers.describe()
        data["counts"] = None if result.counts is None else dict(result.counts)
        data["probabilities"] = None if result.probabilities is None else dict(result.probabilities)
        data["result_metadata"] = dict(result.metadata)
    data["rerun_of"] = spec.rerun_of
    data["template_hash"] = spec.template_hash
    data["sweeps"] = [
        {"sweep": sweep_id, "point": index}
        for sweep_id, index in keeper.store.sweeps_of([record.id]).get(record.id, [])
    ]
    data["comparisons"] = [
        {"id": c.id, "kind": c.kind, "job_a": c.job_a, "job_b": c.job_b, "verdict": c.verdict,
         "result": comparison_result(json.loads(c.report).get("result", {}))}
        for c in job.comparisons
    ]  # fmt: skip
    entry = job.log_entry
    if entry is not None:
        # The DSSE envelope as signed (its own key style), under a name that says so.
        data["signed_envelope"] = json.loads(entry.envelope)
        data["log_index"] = entry.index
        data["signer"] = entry.signer
    # The archive as a whole too (its log, its witness), whatever the job's state: a
    # rolled-back archive shows its jobs as queued, and that must not pass unremarked.
    report = keeper.verify([record.id])
    problems = [*report.problems, *report.trust_problems]
    data["verification"] = {"ok": report.ok, "problems": problems}
    # What no signature covers: everything of a job not yet done, and always its labels.
    data["unsigned"] = sorted(data) if record.state != "done" else list(UNSIGNED_OF_DONE)
    return data


def snake_case(name: str) -> str:
    """``jobKeyA`` → ``job_key_a``: a signed document's lowerCamelCase key in the command
    line's own key style."""
    return "".join("_" + char.lower() if char.isupper() else char for char in name)


def comparison_json(record: ComparisonRecord, rerun_job: str | None = None) -> dict[str, Any]:
    """A rerun's or comparison's JSON (what ``rerun``/``compare --json`` print): its fields
    in snake_case, the comparison's ``result``, and the archived report itself under
    ``signed_report`` (the document whose digest the keep signed, in its own key style)."""
    report = json.loads(record.report)
    fields = {snake_case(key): value for key, value in report.items() if key != "result"}
    return {"id": record.id, **fields, "verdict": record.verdict, "rerun_job": rerun_job,
            "result": comparison_result(report.get("result", {})),
            "signed_report": report}  # fmt: skip


_OLD_OVERLAP = re.compile(r"Hellinger fidelity ([0-9.]+)\.")


def comparison_result(result: Mapping[str, Any]) -> dict[str, Any]:
    """An archived comparison's result under today's names. Reports archived before the
    overlap took statistics' own names carry (Σ√(p·q))² under an older key; it is shown as
    the Bhattacharyya coefficient and Hellinger distance it gives (the signed report itself
    is left as it was signed)."""
    out = dict(result)
    old = out.pop("hellinger_" + "fidelity", None)
    if isinstance(old, (int, float)) and "bhattacharyya_coefficient" not in out:
        bc = math.sqrt(min(max(float(old), 0.0), 1.0))
        out["bhattacharyya_coefficient"] = bc
        out["hellinger_distance"] = math.sqrt(1.0 - bc)
        if isinstance(out.get("summary"), str):
            out["summary"] = _OLD_OVERLAP.sub(
                f"Bhattacharyya coefficient {bc:.4f}, Hellinger distance "
                f"{math.sqrt(1.0 - bc):.4f}.",
                out["summary"],
            )
    return out


#: The fields of a done job that no manifest signs: annotations, bookkeeping, and the
#: seed as asked for (the seed it ran with is signed).
UNSIGNED_OF_DONE = ("labels", "source", "requested_seed", "attempts", "error", "cost",
                    "remote_handle", "rerun_of", "comparisons")  # fmt: skip


__all__ = [
    "UNSIGNED_OF_DONE",
    "comparison_json",
    "comparison_result",
    "job_details",
    "job_json",
    "snake_case",
    "when",
    "when_iso",
]
