"""Commands that queue and run programs: ``submit`` (files, or one program's sweep) and
``run`` (one job, here and now)."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

from jobkeeper.cli._app import (
    BackendOpt,
    JsonOpt,
    KeepOpt,
    LabelsOpt,
    OverBudgetOpt,
    RepeatOpt,
    SeedOpt,
    SetOpt,
    ShotsOpt,
    StoreOpt,
    app,
    echo_json,
    open_keeper,
)
from jobkeeper.cli._progress import activity, counting
from jobkeeper.cli._render import bar_chart, job_json, key_legend, shots_warning, when
from jobkeeper.exceptions import ConfigError, TransientBackendError

if TYPE_CHECKING:
    from jobkeeper.job import Job, Submitted

SweepOpt = Annotated[
    list[str] | None,
    typer.Option(
        "--sweep",
        metavar="NAME=START:STOP:COUNT",
        help="Sweep an input: COUNT values from START to STOP, both included (repeat for a "
        "grid, the first option's input changing slowest).",
        show_default=False,
    ),
]
PointsOpt = Annotated[
    Path | None,
    typer.Option(
        "--points",
        metavar="FILE.csv",
        help="Sweep points from a CSV file: a header of input names, one row a point.",
        show_default=False,
    ),
]


@app.command()
def submit(
    files: Annotated[list[Path], typer.Argument(metavar="FILE", help="OpenQASM 2.0 or 3 files.")],
    backend: BackendOpt = None,
    shots: ShotsOpt = None,
    seed: SeedOpt = None,
    label: LabelsOpt = None,
    repeat: RepeatOpt = 0,
    exact: Annotated[bool, typer.Option("--exact", help="Ask for exact probabilities.")] = False,
    over_budget: OverBudgetOpt = False,
    inputs: SetOpt = None,
    sweep: SweepOpt = None,
    points: PointsOpt = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Queue jobs, or one program's sweep (--sweep, --points); a worker runs them. Jobs
    already done or queued are not queued again."""
    from jobkeeper.options import SubmitOptions

    options = SubmitOptions.of(backend=backend, shots=shots, seed=seed, repeat=repeat,
                               labels=label or (), exact=exact, over_budget=over_budget,
                               inputs=inputs or ())  # fmt: skip
    keeper = open_keeper(keep, store)
    if sweep or points is not None:
        if len(files) != 1:
            raise ConfigError("a sweep (--sweep, --points) takes exactly one FILE")
        with counting("binding the sweep's points", 0) as bar:
            run = keeper.submit_sweep(files[0], options, axes=sweep or (), points=points,
                                      progress=lambda done, total: bar.advance_to(done, total=total))  # fmt: skip
        submitted = run.submitted or []
        _report(submitted, [f"{files[0]} point {p.index}" for p in run.points], run.id, json_out)
        if not json_out:
            fresh = sum(not s.deduplicated for s in submitted)
            typer.echo(f"sweep {run.id[:12]}: {len(submitted)} points, {fresh} queued")
        return
    _report(keeper.submit_many(files, options), [str(f) for f in files], None, json_out)


def _report(
    submitted: list[Submitted], names: list[str], sweep: str | None, json_out: bool
) -> None:
    if json_out:
        echo_json([
            {**job_json(s.job.record), "deduplicated": s.deduplicated,
             "bindings": s.job.spec.bindings_json(), "sweep": sweep}
            for s in submitted
        ])  # fmt: skip
        return
    if sweep is not None and len(submitted) > 20:
        return  # one line for the sweep, not a thousand
    for name, item in zip(names, submitted, strict=True):
        job = item.job.record
        if item.deduplicated and job.state == "done":
            typer.echo(f"{name}: already done on {when(job.finished_at)} as job {job.id[:12]} "
                       "(nothing queued)")  # fmt: skip
        elif item.deduplicated:
            typer.echo(f"{name}: the same job is already {job.state}: {job.id[:12]} (joined)")
        else:
            typer.echo(f"{name}: queued as job {job.id[:12]}")


def _result_json(job: Job, deduplicated: bool) -> dict[str, Any]:
    record = job.record
    result = job.result
    out: dict[str, Any] = {
        "id": record.id,
        "job_key": record.job_key,
        "state": record.state,
        "deduplicated": deduplicated,
        "backend": job.spec.backend,
        "shots": job.spec.shots,
        "seed": job.spec.seed,
        "circuit_hash": job.spec.circuit_hash,
        "bindings": job.spec.bindings_json(),
    }
    if result is not None:
        out["count_keys"] = job.registers.describe()
    if result is not None and result.probabilities is not None:
        out["probabilities"] = dict(result.probabilities)
    elif result is not None:
        out["counts"] = dict(result.counts or {})
    if record.state != "done":
        out["error"] = record.error
    return out


@app.command()
def run(
    file: Annotated[Path, typer.Argument(metavar="FILE", help="OpenQASM 2.0 or 3 file.")],
    backend: BackendOpt = None,
    shots: ShotsOpt = None,
    seed: SeedOpt = None,
    label: LabelsOpt = None,
    repeat: RepeatOpt = 0,
    exact: Annotated[bool, typer.Option("--exact", help="Print exact probabilities.")] = False,
    over_budget: OverBudgetOpt = False,
    inputs: SetOpt = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Submit one job, run it here and now, and print its result."""
    from jobkeeper.options import SubmitOptions

    options = SubmitOptions.of(backend=backend, shots=shots, seed=seed, repeat=repeat,
                               labels=label or (), exact=exact, over_budget=over_budget,
                               inputs=inputs or ())  # fmt: skip
    keeper = open_keeper(keep, store)
    with activity(f"running {file.name} on {backend or 'the default backend'}"):
        item = keeper.run_many([file], options)[0]
    job = item.job
    if json_out:
        echo_json(_result_json(job, item.deduplicated))
    else:
        _print_result(job, item.deduplicated)
    if job.state != "done":
        raise typer.Exit(_exit_code_of_failure(job))


def _exit_code_of_failure(job: Job) -> int:
    """3 when the retry budget ran out on transient faults (the device could not be
    reached or kept failing transiently: DESIGN §4's 'backend could not be reached'),
    1 for any other failure."""
    attempts = job.attempts if job.state == "failed" else []
    unreachable = bool(attempts) and attempts[-1].error_class == TransientBackendError.__name__
    return 3 if unreachable else 1


def _print_result(job: Job, deduplicated: bool) -> None:
    record = job.record
    if deduplicated and record.state == "done":
        typer.echo(f"already done on {when(record.finished_at)} as job {record.id[:12]}; "
                   "showing the archived result")  # fmt: skip
    if record.state != "done":
        typer.echo(f"job {record.id[:12]} {record.state}: {record.error or ''}", err=True)
        return
    result = job.result
    assert result is not None
    spec = job.spec
    typer.echo(f"job {record.id[:12]} on {spec.backend}, {spec.shots} shots, seed {spec.seed}")
    if spec.bindings is not None:
        typer.echo(f"inputs: {spec.bindings.describe()}")
    legend = key_legend(job.registers.describe())
    if legend:
        typer.echo(f"count keys: {legend}")
    if result.probabilities is not None:
        typer.echo("exact probabilities:")
        typer.echo(bar_chart(dict(result.probabilities), total=1.0))
        return
    typer.echo(bar_chart(dict(result.counts or {})))
    warning = shots_warning(spec.shots)
    if warning:
        typer.echo(warning)
