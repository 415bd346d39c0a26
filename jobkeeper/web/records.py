"""Records a figure or a page can show, read through :class:`~jobkeeper.keeper.Keeper`:
a job or a comparison found by id or prefix, its panels, and the digest of its bundle."""

from __future__ import annotations

import hashlib
import json
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from jobkeeper.exceptions import AmbiguousJobId, ConfigError, JobNotFound
from jobkeeper.outputs import check_output, write_output
from jobkeeper.web.figures import (
    FORMATS,
    FigureSource,
    Format,
    Histogram,
    comparison_figure,
    histogram_figure,
    render,
)

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from jobkeeper.job import Job
    from jobkeeper.keeper import Keeper
    from jobkeeper.store import ComparisonRecord


@dataclass(frozen=True)
class Found:
    """A record by kind: exactly one of ``job`` and ``comparison`` is set."""

    kind: str
    id: str
    job: Job | None = None
    comparison: ComparisonRecord | None = None


def find_record(keeper: Keeper, id_or_prefix: str) -> Found:
    """The job or comparison whose id starts with ``id_or_prefix`` (JobNotFound when none,
    AmbiguousJobId when it names several, of one kind or across kinds)."""
    text = id_or_prefix.strip().lower()
    found: list[Found] = []
    try:
        job = keeper.job(text)
        found.append(Found("job", job.id, job=job))
    except JobNotFound:
        pass
    matches = [c for c in keeper.store.comparisons() if c.id.startswith(text)] if text else []
    exact = [c for c in matches if c.id == text]
    found += [Found("comparison", c.id, comparison=c) for c in (exact or matches)]
    if not found:
        raise JobNotFound(f"no job or comparison matches {id_or_prefix!r}")
    if len(found) > 1:
        kinds = ", ".join(sorted({f"{f.kind} {f.id[:12]}" for f in found}))
        raise AmbiguousJobId(f"{id_or_prefix!r} matches several records ({kinds}); give more")
    return found[0]


def job_panel(job: Job, title: str | None = None) -> Histogram:
    """A done job's counts (or exact probabilities) as one panel."""
    result = job.result
    if result is None:
        raise ConfigError(f"job {job.id[:12]} is {job.state}: nothing to draw yet")
    heading = title or f"job {job.id[:12]} · {job.spec.backend}"
    if result.counts is None:
        return Histogram(heading, dict(result.probabilities or {}), None)
    return Histogram(heading, dict(result.counts), job.spec.shots)


def bundle_digest(keeper: Keeper, found: Found) -> str:
    """SHA-256 of the bundle of exactly this record, the bytes ``jobkeeper bundle ID``
    writes for a job (a comparison's bundle holds its own log entry). A bundle proves its
    entries against the log's latest checkpoint, so the digest is that of the bundle as
    the log stands now: the same record drawn again after the log has grown names a newer
    bundle, which verifies the same entry."""
    from jobkeeper.audit.verification import export_bundle, require_ok

    with tempfile.TemporaryDirectory(prefix="jobkeeper-figure-") as tmp:
        path = Path(tmp) / "bundle.json"
        if found.kind == "job":
            keeper.bundle(path, [found.id])
        else:  # as keeper.bundle does for a job: never a bundle of an unverified archive
            require_ok(keeper.verify(integrity_only=True), "not drawn")
            export_bundle(keeper.store, [found.id], path)
        return "sha256:" + hashlib.sha256(path.read_bytes()).hexdigest()


def record_figure(
    keeper: Keeper, found: Found, *, caption: bool = False
) -> tuple[Figure, FigureSource]:
    """The figure of a job (histogram) or a comparison (two histograms side by side)."""
    source = FigureSource(found.kind, found.id, bundle_digest(keeper, found), caption)
    if found.job is not None:
        return histogram_figure(job_panel(found.job), source), source
    assert found.comparison is not None
    comparison = found.comparison
    first = keeper.job(comparison.job_a)
    a = job_panel(first, f"A · job {first.id[:8]}")
    if comparison.job_b is None:
        from jobkeeper.audit.judging import ideal_distribution

        # From the verified manifest's circuit, as the comparison itself was made.
        ideal = ideal_distribution(keeper.store, first.record, keeper.trust.load().keys)
        b = Histogram("B · ideal (exact)", ideal, None)
    else:
        second = keeper.job(comparison.job_b)
        b = job_panel(second, f"B · job {second.id[:8]}")
    verdict = _verdict_line(comparison)
    return comparison_figure(a, b, source, verdict=verdict), source


def _verdict_line(comparison: ComparisonRecord) -> str:
    """The first sentence the comparison archived (its verdict, with the test's p)."""
    result = json.loads(comparison.report).get("result")
    summary = result.get("summary") if isinstance(result, dict) else None
    if isinstance(summary, str) and summary.strip():
        return summary.strip().splitlines()[0]
    return f"{comparison.kind} comparison: {comparison.verdict}"


def figure_format(path: Path) -> Format:
    """The format a file name asks for (ConfigError for any other)."""
    suffix = path.suffix.lower().lstrip(".")
    for fmt in FORMATS:
        if suffix == fmt:
            return fmt
    raise ConfigError(f"{path}: a figure is written as .svg, .png or .pdf, not {path.suffix!r}")


def plot(
    keeper: Keeper, id_or_prefix: str, path: Path, *, caption: bool = False, force: bool = False
) -> FigureSource:
    """Draw a record to ``path`` (format from its suffix), by the rules of
    :mod:`jobkeeper.outputs`: never over a file without ``force``, never into the keep.
    Returns what the figure's metadata names."""
    fmt = figure_format(path)
    check_output(path, guarded=keeper.guarded_paths(), force=force)  # before any drawing
    found = find_record(keeper, id_or_prefix)
    fig, source = record_figure(keeper, found, caption=caption)
    write_output(path, render(fig, fmt, source), guarded=keeper.guarded_paths(), force=force)
    return source


__all__ = [
    "Found",
    "bundle_digest",
    "figure_format",
    "find_record",
    "job_panel",
    "plot",
    "record_figure",
]  # fmt: skip
