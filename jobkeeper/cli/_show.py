"""What ``jobkeeper show`` says about one job: what ran, where, when, from which code,
its attempts, its result and whether its provenance verifies."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from jobkeeper.cli._render import bar_chart, key_legend, shots_warning
from jobkeeper.shapes import job_details

if TYPE_CHECKING:
    from jobkeeper.job import Job
    from jobkeeper.keeper import Keeper


@dataclass
class JobDetails:
    data: dict[str, Any]
    text: str


def describe_job(keeper: Keeper, job: Job) -> JobDetails:
    data = job_details(keeper, job)
    return JobDetails(data=data, text=_text(data))


def _seed_origin(d: dict[str, Any]) -> str:
    asked = d["requested_seed"]
    if asked is None:
        return " (chosen at submission)"
    if asked != d["seed"]:
        return f" (derived from seed {asked} for repeat {d['repeat']})"
    return ""


def _inputs(d: dict[str, Any]) -> list[str]:
    """The values a bound circuit's inputs took, its template, and the sweeps it is a
    point of (a grouping: no statement signs which sweeps a job belongs to)."""
    lines = []
    if d.get("bindings") is not None:
        values = ", ".join(f"{name}={value}" for name, value in d["bindings"].items())
        lines.append(f"  inputs     {values}  (template {d['template_hash']})")
    for item in d.get("sweeps", []):
        lines.append(f"  sweep      {item['sweep']} point {item['point']}  (unsigned)")
    return lines


def _text(d: dict[str, Any]) -> str:
    lines = [
        f"job {d['id']}",
        f"  state      {d['state']}" + (f" ({d['error']})" if d.get("error") else ""),
        f"  backend    {d['backend']}",
        f"  shots      {d['shots']}   seed {d['seed']}{_seed_origin(d)}   repeat {d['repeat']}",
        f"  labels     {', '.join(d['labels']) or '-'}  (unsigned)",
        f"  source     {d['source'] or '-'} (name unsigned)  ({d['source_hash'] or 'no source hash'})",
        f"  circuit    {d['circuit_hash']}",
        *_inputs(d),
        f"  job key    {d['job_key']}",
        f"  submitted  {d['created_at']}",
        f"  started    {d['started_at'] or '-'}",
        f"  finished   {d['finished_at'] or '-'}",
    ]
    code = d.get("code_version") or {}
    if code.get("commit"):
        dirty = " (uncommitted changes)" if code.get("dirty") else ""
        lines.append(f"  code       git {code['commit']}{dirty}")
    else:
        lines.append("  code       not submitted from a git checkout")
    if d["attempt_history"]:
        lines.append("  attempts:")
        for a in d["attempt_history"]:
            how = "  (retried within the call)" if a["in_call"] else ""
            lines.append(f"    {a['number']}. {a['at']}  {a['error_class']}: {a['message']}{how}")
    legend = key_legend(d.get("count_keys") or {})
    if legend:
        lines.append(f"  keys       {legend}")
    if d.get("probabilities") is not None:
        lines.append("  exact probabilities:")
        lines.append(bar_chart(d["probabilities"], total=1.0))
    elif d.get("counts") is not None:
        lines.append("  counts:")
        lines.append(bar_chart(d["counts"]))
        warning = shots_warning(int(d["shots"]))
        if warning:
            lines.append("  " + warning)
    if d.get("rerun_of"):
        lines.append(f"  rerun of   job {d['rerun_of'][:12]}")
    for c in d.get("comparisons", []):
        other = c["job_b"] if c["job_a"] == d["id"] else c["job_a"]
        against = "the ideal distribution" if other is None else f"job {other[:12]}"
        tvd = c["result"].get("tvd")
        extra = f", TVD {tvd:.4f}" if isinstance(tvd, float) else ""
        lines.append(f"  {c['kind']:<10} with {against}: {c['verdict']}{extra} "
                     f"(comparison {c['id'][:12]})")  # fmt: skip
    v = d["verification"]
    if "log_index" in d:
        status = "verified" if v["ok"] else "VERIFICATION FAILED"
        lines.append(
            f"  provenance {status}: log entry {d['log_index']}, signed by {d['signer'][:16]}…"
        )
    elif d["state"] == "done":
        lines.append("  provenance MISSING: no log entry for this done job")
    else:
        lines.append(f"  provenance none yet: nothing about a {d['state']} job is signed "
                     "(its record is signed when it is done)")  # fmt: skip
        if not v["ok"]:
            lines.append("  archive    VERIFICATION FAILED:")
    lines += [f"    - {p}" for p in v["problems"]]
    return "\n".join(lines)
