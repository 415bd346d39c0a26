"""How a sweep is shown: its record and points (``show``), its counts (``counts``)."""

from __future__ import annotations

import csv
import io
import json
from collections import Counter
from typing import TYPE_CHECKING, Any

from jobkeeper.cli._render import table, when
from jobkeeper.shapes import when_iso

if TYPE_CHECKING:
    from jobkeeper.keeper import SweepRun


def describe_sweep(run: SweepRun) -> tuple[dict[str, Any], str]:
    """``show SWEEP``: the record, how many points are in each state, and each point's
    job and bindings (JSON), or the first and last points (text)."""
    record = run.record
    jobs = run.jobs
    states = Counter(str(job.state) for job in jobs)
    data = {
        "id": record.id,
        "template_hash": record.template_hash,
        "definition": record.definition,
        "labels": list(record.labels),
        "created_at": when_iso(record.created_at),
        "points": len(run.points),
        "states": dict(sorted(states.items())),
        "jobs": [
            {"point": p.index, "job": job.id, "state": str(job.state), "bindings": p.numbers()}
            for p, job in zip(run.points, jobs, strict=True)
        ],
        "template": record.template_text,
    }
    lines = [
        f"sweep {record.id}",
        f"template: {record.template_hash}",
        f"definition: {json.dumps(record.definition, sort_keys=True)}",
        f"labels (unsigned): {', '.join(record.labels) or '-'}",
        f"created: {when(record.created_at)}",
        f"points: {len(run.points)} ("
        + ", ".join(f"{n} {state}" for state, n in sorted(states.items())) + ")",
    ]  # fmt: skip
    shown = list(zip(run.points, jobs, strict=True))
    if len(shown) > 20:
        shown = shown[:10] + shown[-10:]
    rows = [[str(p.index), job.id[:12], str(job.state),
             ", ".join(f"{k}={v}" for k, v in p.texts().items())] for p, job in shown]  # fmt: skip
    lines.append(table(rows, ["POINT", "JOB", "STATE", "INPUTS"]))
    if len(run.points) > 20:
        lines.append(f"({len(run.points) - 20} points not shown; --json lists them all)")
    return data, "\n".join(lines)


def sweep_counts(run: SweepRun, fmt: str) -> str:
    """``counts SWEEP``: CSV with a row per point and outcome (the inputs as columns), or
    JSON, one object per done point with its bindings and counts."""
    rows = run.table(texts=fmt == "csv")
    done = [job for job in run.jobs if job.state == "done"]
    # every point is one template bound: one register layout for all of them
    layout = done[0].registers if done else None
    if fmt == "json":
        by_point: dict[tuple[Any, ...], dict[str, Any]] = {}
        names = [item["name"] for item in run.points[0].bindings] if run.points else []
        for row in rows:
            key = tuple(row[name] for name in names)
            value = row.get("count", row.get("probability"))
            point = by_point.setdefault(key, {"bindings": {n: row[n] for n in names}, "counts": {}})
            if layout is not None:
                point["count_keys"] = layout.describe()
            point["counts"][row["outcome"]] = value
        return json.dumps(list(by_point.values()), sort_keys=True) + "\n"
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    names = [item["name"] for item in run.points[0].bindings] if run.points else []
    column = "probability" if rows and "probability" in rows[0] else "count"
    registers = [] if layout is None else layout.columns(taken=names)
    writer.writerow([*names, "outcome", *registers, column])
    for row in rows:
        parts = [] if layout is None else layout.split(row["outcome"])
        writer.writerow([*(row[name] for name in names), row["outcome"], *parts, row[column]])
    return buffer.getvalue()
