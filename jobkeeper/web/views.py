"""What each page of the web view shows, read through :class:`~jobkeeper.keeper.Keeper`
into plain values for the templates (and, for ``/api``, the shapes the command line's
``--json`` prints). No HTML here: the templates render, with autoescaping."""

from __future__ import annotations

import datetime as dt
import json
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any
from urllib.parse import urlencode

from markupsafe import Markup

from jobkeeper.exceptions import ConfigError, JobkeeperError
from jobkeeper.queue import JobState
from jobkeeper.shapes import (
    comparison_json,
    comparison_result,
    job_details,
    job_json,
    when,
    when_iso,
)
from jobkeeper.store import JobFilter, PageCursor
from jobkeeper.web.figures import SMALL_SHOTS, inline_svg
from jobkeeper.web.records import Found, find_record, record_figure

if TYPE_CHECKING:
    from jobkeeper.job import Job
    from jobkeeper.keeper import Keeper
    from jobkeeper.provenance import VerifyReport

PAGE_SIZE = 50
MAX_PAGE_SIZE = 500
#: Outcomes listed in a job page's table (all of them are in its JSON).
TABLE_OUTCOMES = 64


@dataclass(frozen=True)
class ListQuery:
    """A job list's filters and cursor, as read from a query string."""

    label: str | None = None
    state: str | None = None
    backend: str | None = None
    date_from: str | None = None
    date_to: str | None = None
    after: PageCursor | None = None
    limit: int = PAGE_SIZE

    @classmethod
    def parse(cls, params: Mapping[str, str]) -> ListQuery:
        def text(name: str) -> str | None:
            value = params.get(name, "").strip()
            return value or None

        state = text("state")
        if state is not None and state not in set(JobState):
            raise ConfigError(f"unknown state {state!r}; states are: {', '.join(JobState)}")
        for name in ("from", "to"):
            if text(name) is not None:
                _day(text(name) or "")
        try:
            limit = int(params.get("limit", PAGE_SIZE))
        except ValueError as exc:
            raise ConfigError("limit must be a whole number") from exc
        return cls(label=text("label"), state=state, backend=text("backend"),
                   date_from=text("from"), date_to=text("to"), after=_cursor(text("after")),
                   limit=max(1, min(limit, MAX_PAGE_SIZE)))  # fmt: skip

    def filter(self) -> JobFilter:
        until = None if self.date_to is None else _day(self.date_to) + 86400.0
        since = None if self.date_from is None else _day(self.date_from)
        return JobFilter(label=self.label, state=self.state, backend=self.backend,
                         since=since, until=until)  # fmt: skip

    def url(self, after: PageCursor | None) -> str:
        fields = {"label": self.label, "state": self.state, "backend": self.backend,
                  "from": self.date_from, "to": self.date_to}  # fmt: skip
        if self.limit != PAGE_SIZE:
            fields["limit"] = str(self.limit)
        if after is not None:
            fields["after"] = f"{after[0]!r}~{after[1]}"
        kept = {k: v for k, v in fields.items() if v is not None}
        return "/jobs" + ("?" + urlencode(kept) if kept else "")


def _day(text: str) -> float:
    try:
        day = dt.date.fromisoformat(text)
    except ValueError as exc:
        raise ConfigError(f"{text!r} is not a date (YYYY-MM-DD)") from exc
    return dt.datetime(day.year, day.month, day.day, tzinfo=dt.UTC).timestamp()


def _cursor(text: str | None) -> PageCursor | None:
    if text is None:
        return None
    at, sep, job_id = text.partition("~")
    try:
        if not sep or any(ch not in "0123456789abcdef" for ch in job_id):
            raise ValueError(text)
        return float(at), job_id
    except ValueError as exc:
        raise ConfigError("the page cursor is malformed: start again from the first page") from exc


def _row(record: Any) -> dict[str, Any]:
    return {"id": record.id, "state": record.state, "backend": record.spec.backend,
            "shots": record.spec.shots, "labels": record.labels,
            "source": record.spec.source_name, "created": when(record.created_at),
            "finished": when(record.finished_at)}  # fmt: skip


def job_list(keeper: Keeper, query: ListQuery) -> dict[str, Any]:
    """One page of the job list, its total and the links to the pages around it."""
    where = query.filter()
    jobs = keeper.job_page(where, after=query.after, limit=query.limit + 1)
    more = len(jobs) > query.limit
    jobs = jobs[: query.limit]
    last = jobs[-1].record if jobs else None
    next_after = (last.created_at, last.id) if more and last is not None else None
    return {
        "jobs": [_row(job.record) for job in jobs],
        "records": [job.record for job in jobs],
        "total": keeper.count_jobs(where),
        "f": query,
        "after": query.after,
        "next_url": None if next_after is None else query.url(next_after),
        "first_url": query.url(None),
        "all_states": list(JobState),
        "all_backends": sorted(keeper.backend_configs()),
    }


def overview(keeper: Keeper) -> dict[str, Any]:
    states = keeper.counts_by_state()
    recent = keeper.job_page(JobFilter(), limit=10)
    workers: dict[str, list[float]] = {}
    for job in keeper.jobs(state="running"):
        if job.record.lease_owner:
            workers.setdefault(job.record.lease_owner, []).append(job.record.lease_expires or 0)
    budget = keeper.config.budget
    budgets: list[dict[str, Any]] = []
    if budget.total is not None:
        budgets.append({"label": None, "spent": keeper.spent(), "cap": budget.total})
    for label, cap in sorted(budget.labels.items()):
        budgets.append({"label": label, "spent": keeper.spent(label), "cap": cap})
    return {
        "states": [(s.value, states.get(s.value, 0)) for s in JobState],
        "total": sum(states.values()),
        "recent": [_row(job.record) for job in recent],
        "budgets": budgets,
        "spent": keeper.spent(),
        "workers": [
            {"owner": owner, "jobs": len(times), "until": when(max(times))}
            for owner, times in sorted(workers.items())
        ],
        "comparisons": list(reversed(keeper.comparisons()))[:10],
        "log": log_summary(keeper),
    }


def overview_json(data: Mapping[str, Any]) -> dict[str, Any]:
    return {
        "states": dict(data["states"]),
        "total": data["total"],
        "spent": data["spent"],
        "budgets": data["budgets"],
        "workers": [{"owner": w["owner"], "jobs": w["jobs"]} for w in data["workers"]],
        "log": {k: v for k, v in data["log"].items() if k != "note"},
    }


def log_summary(keeper: Keeper) -> dict[str, Any]:
    status = keeper.log_status()
    return {
        "size": status.size,
        "checkpoints": status.checkpoints,
        "checkpoint_at": when(status.checkpoint_at) if status.checkpoint_at else None,
        "note": status.note,
        "origin": status.origin,
        "fingerprint": keeper.keys()[0].fingerprint,
        "trusted": sorted(keeper.trust.load().keys),
    }


def _verdict(ok: bool, problems: list[str], only_trust: bool = False) -> str:
    if ok:
        return "Verified now: signatures, counts digests and the log hold, signed by a trusted key"
    if only_trust:
        return "Signatures and the log hold, but a signer is not trusted by this keep"
    return f"Verification found {len(problems)} problem(s)"


def report_view(report: VerifyReport) -> dict[str, Any]:
    problems = [*report.problems, *report.trust_problems]
    verdict = _verdict(report.ok, problems, report.only_trust_failed)
    return {"ok": report.ok, "checked": report.checked, "problems": problems,
            "warnings": list(report.warnings), "verdict": verdict}  # fmt: skip


def job_page(keeper: Keeper, job_id: str) -> dict[str, Any]:
    """Everything the job page shows. Its verification is computed now, as ``jobkeeper
    show`` does; the signed manifest is shown only once it verifies."""
    job = keeper.job(job_id)
    details = job_details(keeper, job)
    data: dict[str, Any] = {"job": details, "details": details, "circuit": job.spec.circuit_text}
    data["attempts"] = details["attempt_history"]
    data["report"] = None
    verification = details.get("verification")
    if isinstance(verification, Mapping):  # computed now by job_details, as `show` does
        problems = list(verification["problems"])
        data["report"] = {"ok": verification["ok"], "checked": 1, "problems": problems,
                          "warnings": [], "verdict": _verdict(bool(verification["ok"]), problems)}  # fmt: skip
    data["manifest"] = _manifest_fields(keeper, job) if job.state == "done" else None
    data.update(_result(keeper, job))
    data["comparisons"] = [
        {"id": c.id, "kind": c.kind, "verdict": c.verdict,
         "other": c.job_b if c.job_a == job.id else c.job_a}
        for c in job.comparisons
    ]  # fmt: skip
    return data


def _result(keeper: Keeper, job: Job) -> dict[str, Any]:
    result = job.result
    if result is None:
        return {"figure": None, "outcomes": None}
    exact = result.counts is None
    values: Mapping[str, float] = (
        dict(result.probabilities or {}) if exact else dict(result.counts or {})
    )
    total = 1.0 if exact else float(job.spec.shots) or 1.0
    ordered = sorted(values.items(), key=lambda kv: (-kv[1], kv[0]))
    fig, source = record_figure(keeper, Found("job", job.id, job=job))
    shots_note = None
    if not exact and job.spec.shots < SMALL_SHOTS:
        shots_note = (
            f"{job.spec.shots} shots is a small sample: the frequencies are rough estimates."
        )
    return {
        "exact": exact,
        "figure": Markup(inline_svg(fig, source, prefix="job-")),
        "caption": f"Figure data: job {job.id}; bundle {source.bundle_digest}",
        "outcomes": [
            {
                "key": k,
                "value": (f"{v:.6g}" if exact else int(v)),
                "share": f"{100 * v / total:.2f}%",
            }
            for k, v in ordered[:TABLE_OUTCOMES]
        ],
        "more_outcomes": max(0, len(ordered) - TABLE_OUTCOMES),
        "shots_note": shots_note,
    }


def _manifest_fields(keeper: Keeper, job: Job) -> list[tuple[str, str]] | None:
    try:
        statement = keeper.manifest(job)
    except JobkeeperError:
        return None  # the verification block above says why
    fields = manifest_fields(statement)
    entry = job.log_entry
    if entry is not None:
        fields[2:2] = [("log index", str(entry.index)), ("signed by", entry.signer)]
    return fields


def manifest_fields(statement: Mapping[str, Any]) -> list[tuple[str, str]]:
    """A Statement's fields as (path, value) rows: its predicate type, subject digests,
    then every predicate field but the circuit text and counts (shown on their own)."""
    fields: list[tuple[str, str]] = [("predicate type", str(statement.get("predicateType")))]
    for subject in statement.get("subject", []):
        for algorithm, digest in subject.get("digest", {}).items():
            fields.append((f"subject {subject.get('name')}", f"{algorithm}:{digest}"))
    _flatten(statement.get("predicate", {}), "", fields)
    return fields


#: Shown elsewhere on the page (the circuit text, the counts).
_SKIPPED = {"circuit.canonicalText", "counts", "result.counts", "probabilities"}


def _flatten(value: Any, path: str, out: list[tuple[str, str]]) -> None:
    if path in _SKIPPED:
        return
    if isinstance(value, Mapping) and value:
        for key in value:
            _flatten(value[key], f"{path}.{key}" if path else str(key), out)
    elif isinstance(value, list) and value and all(isinstance(v, Mapping) for v in value):
        for i, item in enumerate(value):
            _flatten(item, f"{path}[{i}]", out)
    else:
        text = value if isinstance(value, str) else json.dumps(value)
        out.append((path, text if len(text) <= 400 else text[:400] + " …"))


def comparison_page(keeper: Keeper, comparison_id: str) -> dict[str, Any]:
    found = find_record(keeper, comparison_id)
    if found.comparison is None:
        raise ConfigError(f"{comparison_id!r} is a job, not a comparison")
    fig, source = record_figure(keeper, found)
    report = json.loads(found.comparison.report)
    result = report.get("result", {})
    return {
        "c": found.comparison,
        "figure": Markup(inline_svg(fig, source, prefix="cmp-")),
        "summary": comparison_result(result).get("summary", "")
        if isinstance(result, Mapping)
        else "",
        "json": comparison_json(found.comparison),
    }


__all__ = [
    "ListQuery",
    "comparison_json",
    "comparison_page",
    "job_json",
    "job_list",
    "job_page",
    "log_summary",
    "overview",
    "overview_json",
    "report_view",
    "when_iso",
]  # fmt: skip
