"""Commands that submit, run, list and inspect jobs."""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

from jobkeeper.cli._app import (
    BackendOpt,
    JsonOpt,
    KeepOpt,
    LabelOpt,
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
    progress_wait,
)
from jobkeeper.cli._progress import activity
from jobkeeper.cli._render import bar_chart, job_json, shots_warning, table, when
from jobkeeper.exceptions import ConfigError, JobkeeperError, TransientBackendError

if TYPE_CHECKING:
    from jobkeeper.job import Job


@app.command()
def init(keep: KeepOpt = None, store: StoreOpt = None, json_out: JsonOpt = False) -> None:
    """Create a keep: archive, configuration and signing key."""
    keeper = open_keeper(keep, store)
    record = keeper.keys()[0]
    info = {
        "keep": str(keeper.path.resolve()),
        "store": keeper.store.location,
        "fingerprint": record.fingerprint,
    }
    if json_out:
        echo_json(info)
    else:
        typer.echo(f"keep ready at {info['keep']}")
        typer.echo(f"archive: {info['store']}")
        typer.echo(f"signing key fingerprint: {record.fingerprint}")


@app.command()
def backends(keep: KeepOpt = None, store: StoreOpt = None, json_out: JsonOpt = False) -> None:
    """List the backends this keep can use."""
    keeper = open_keeper(keep, store)
    infos = keeper.backend_infos()
    if json_out:
        echo_json([
            {"name": i.name, "kind": i.kind, "version": i.version, "max_qubits": i.max_qubits,
             "max_shots": i.max_shots, "deterministic": i.deterministic,
             "mid_circuit_measurement": i.mid_circuit_measurement,
             "config_hash": i.config_hash, "description": i.description}
            for i in infos
        ])  # fmt: skip
        return
    rows = [[i.name, i.kind, str(i.max_qubits), "yes" if i.deterministic else "no", i.version]
            for i in infos]  # fmt: skip
    typer.echo(table(rows, ["NAME", "KIND", "MAX QUBITS", "DETERMINISTIC", "VERSION"]))


@app.command()
def check(
    file: Annotated[Path, typer.Argument(metavar="FILE", help="OpenQASM 2.0 or 3 file.")],
    backend: BackendOpt = None,
    shots: ShotsOpt = None,
    inputs: SetOpt = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Check a circuit before spending on it: metrics and whether it fits a backend."""
    keeper = open_keeper(keep, store)
    report = keeper.check(file, inputs=inputs or (), backend=backend, shots=shots)
    if json_out:
        echo_json(report.to_json())
    else:
        typer.echo(report.summary())
    if not report.fits:
        raise typer.Exit(1)


@app.command()
def submit(
    files: Annotated[list[Path], typer.Argument(metavar="FILE", help="OpenQASM 2.0 files.")],
    backend: BackendOpt = None,
    shots: ShotsOpt = None,
    seed: SeedOpt = None,
    label: LabelsOpt = None,
    repeat: RepeatOpt = 0,
    exact: Annotated[bool, typer.Option("--exact", help="Ask for exact probabilities.")] = False,
    over_budget: OverBudgetOpt = False,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Queue jobs; a worker runs them. Jobs already done or queued are not queued again."""
    from jobkeeper.options import SubmitOptions

    options = SubmitOptions.of(backend=backend, shots=shots, seed=seed, repeat=repeat,
                               labels=label or (), exact=exact,
                               over_budget=over_budget)  # fmt: skip
    keeper = open_keeper(keep, store)
    submitted = keeper.submit_many(files, options)
    if json_out:
        echo_json([
            {"id": s.job.id, "job_key": s.job.record.job_key, "state": s.job.state,
             "deduplicated": s.deduplicated}
            for s in submitted
        ])  # fmt: skip
        return
    for file, item in zip(files, submitted, strict=True):
        job = item.job.record
        if item.deduplicated and job.state == "done":
            typer.echo(f"{file}: already done on {when(job.finished_at)} as job {job.id[:12]} "
                       "(nothing queued)")  # fmt: skip
        elif item.deduplicated:
            typer.echo(f"{file}: the same job is already {job.state}: {job.id[:12]} (joined)")
        else:
            typer.echo(f"{file}: queued as job {job.id[:12]}")


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
    }
    if result is not None and result.probabilities is not None:
        out["probabilities"] = dict(result.probabilities)
    elif result is not None:
        out["counts"] = dict(result.counts or {})
    if record.state != "done":
        out["error"] = record.error
    return out


@app.command()
def run(
    file: Annotated[Path, typer.Argument(metavar="FILE", help="OpenQASM 2.0 file.")],
    backend: BackendOpt = None,
    shots: ShotsOpt = None,
    seed: SeedOpt = None,
    label: LabelsOpt = None,
    repeat: RepeatOpt = 0,
    exact: Annotated[bool, typer.Option("--exact", help="Print exact probabilities.")] = False,
    over_budget: OverBudgetOpt = False,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Submit one job, run it here and now, and print its result."""
    from jobkeeper.options import SubmitOptions

    options = SubmitOptions.of(backend=backend, shots=shots, seed=seed, repeat=repeat,
                               labels=label or (), exact=exact,
                               over_budget=over_budget)  # fmt: skip
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
    if result.probabilities is not None:
        typer.echo("exact probabilities:")
        typer.echo(bar_chart(dict(result.probabilities), total=1.0))
        return
    typer.echo(bar_chart(dict(result.counts or {})))
    warning = shots_warning(spec.shots)
    if warning:
        typer.echo(warning)


@app.command()
def worker(
    once: Annotated[bool, typer.Option("--once", help="Exit when the queue is drained.")] = False,
    slots: Annotated[
        int, typer.Option("--slots", min=1, help="Local simulations this worker runs at once.")
    ] = 2,
    in_flight: Annotated[
        int, typer.Option("--in-flight", min=1, help="Jobs held at once (starts and polls).")
    ] = 64,
    backend: Annotated[
        list[str] | None, typer.Option("--backend", "-b", help="Only jobs of these backends.")
    ] = None,
    lease: Annotated[float, typer.Option("--lease", help="Lease length, seconds.")] = 60.0,
    heartbeat: Annotated[float, typer.Option("--heartbeat", help="Lease renewal, seconds.")] = 10.0,
    lease_check: Annotated[
        float,
        typer.Option(
            "--lease-check", min=0.1, help="How often to look for expired leases, seconds."
        ),
    ] = 15.0,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Drain the queue: run local jobs, drive remote ones, seal and archive results."""
    from jobkeeper.options import positive_seconds
    from jobkeeper.queue import LeasePolicy

    for option, seconds in (("--lease", lease), ("--heartbeat", heartbeat),
                            ("--lease-check", lease_check)):  # fmt: skip
        positive_seconds(seconds, option)  # inf and nan too: a lease must run out
    if not 0 < heartbeat < lease:
        raise ConfigError("--heartbeat must be positive and shorter than --lease")
    from jobkeeper.worker import settle_daemon

    keeper = open_keeper(keep, store)
    settle_daemon()  # this process is the worker and nothing else
    stats = keeper.work(
        once=once, install_signals=True, slots=slots, in_flight=in_flight,
        backends=backend or None,
        lease=LeasePolicy(lease=lease, heartbeat=heartbeat, expiry_check=lease_check),
        announce=lambda owner: typer.echo(
            f"worker {owner} started on {keeper.store.location}", err=True
        ),
    )  # fmt: skip
    summary = {"claimed": stats.claimed, "done": stats.done, "failed": stats.failed,
               "retried": stats.retried, "cancelled": stats.cancelled,
               "lost_leases": stats.lost_leases}  # fmt: skip
    if json_out:
        echo_json(summary)
    else:
        typer.echo(", ".join(f"{k.replace('_', ' ')} {v}" for k, v in summary.items()), err=True)


@app.command()
def jobs(
    label: LabelOpt = None,
    state: Annotated[str | None, typer.Option("--state", help="Only jobs in this state.")] = None,
    limit: Annotated[int | None, typer.Option("--limit", min=1, help="At most this many.")] = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """List jobs, oldest first."""
    from jobkeeper.queue import JobState

    if state is not None and state not in set(JobState):
        raise ConfigError(f"unknown state {state!r}; states are: {', '.join(JobState)}")
    keeper = open_keeper(keep, store, create=False)
    records = [j.record for j in keeper.jobs(label=label, state=state, limit=limit)]
    if json_out:
        echo_json([job_json(r) for r in records])
        return
    rows = [[r.id[:12], r.state, r.spec.backend, str(r.spec.shots), ", ".join(r.labels) or "-",
             r.spec.source_name or "-", when(r.created_at)] for r in records]  # fmt: skip
    # Labels and file names are annotations no manifest signs: the header says so.
    headers = ["ID", "STATE", "BACKEND", "SHOTS", "LABELS (UNSIGNED)", "SOURCE", "CREATED"]
    typer.echo(table(rows, headers))


@app.command()
def show(
    job_id: Annotated[str, typer.Argument(metavar="JOB", help="Job id or unambiguous prefix.")],
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Everything about one job: what ran, where, when, attempts, result, provenance."""
    from jobkeeper.cli._show import describe_job

    keeper = open_keeper(keep, store, create=False)
    details = describe_job(keeper, keeper.job(job_id))
    if json_out:
        echo_json(details.data)
    else:
        typer.echo(details.text)
    if not details.data["verification"]["ok"]:
        raise typer.Exit(1)  # what was shown does not match what is signed


@app.command()
def wait(
    job_ids: Annotated[list[str], typer.Argument(metavar="JOB", help="Job ids or prefixes.")],
    timeout: Annotated[
        float | None, typer.Option("--timeout", help="Give up after seconds.")
    ] = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Wait until jobs end (a worker must be running). Exit 1 if any failed."""
    keeper = open_keeper(keep, store, create=False)
    ids = [keeper.job(j).id for j in job_ids]
    try:
        records = [job.record for job in progress_wait(keeper, ids, timeout)]
    except TimeoutError as exc:
        typer.echo(f"jobkeeper: {exc}", err=True)
        raise typer.Exit(1) from exc
    if json_out:
        echo_json([{"id": r.id, "state": r.state, "error": r.error} for r in records])
    else:
        for r in records:
            typer.echo(f"{r.id[:12]}  {r.state}" + (f"  {r.error}" if r.error else ""))
    if any(r.state != "done" for r in records):
        raise typer.Exit(1)


@app.command()
def counts(
    job_id: Annotated[str, typer.Argument(metavar="JOB", help="Job id or unambiguous prefix.")],
    fmt: Annotated[str, typer.Option("--format", help="json or csv.")] = "json",
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Print a done job's counts (or exact probabilities): JSON unless --format csv."""
    if fmt not in ("json", "csv"):
        raise ConfigError(f"--format must be json or csv, not {fmt!r}")
    if json_out and fmt != "json":
        raise ConfigError("--json and --format csv exclude each other")
    keeper = open_keeper(keep, store, create=False)
    job = keeper.job(job_id)
    result = job.result
    if result is None:
        raise JobkeeperError(f"job {job.id[:12]} is {job.state}: it has no counts")
    values: dict[str, Any] = dict(result.probabilities or result.counts or {})
    if fmt == "json":
        typer.echo(json.dumps(values, sort_keys=True))
        return
    import csv  # only this format needs it
    import io

    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(["outcome", "probability" if result.probabilities else "count"])
    for key in sorted(values):
        writer.writerow([key, values[key]])
    typer.echo(buffer.getvalue(), nl=False)


@app.command()
def cancel(
    job_id: Annotated[str, typer.Argument(metavar="JOB", help="Job id or unambiguous prefix.")],
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Cancel a job: at once if queued; a worker cancels a running or remote one."""
    keeper = open_keeper(keep, store, create=False)
    job = keeper.cancel(job_id)
    if json_out:
        echo_json({"id": job.id, "state": job.state, "cancel_requested": True})
    elif job.state == "cancelled":
        typer.echo(f"job {job.id[:12]} cancelled")
    else:
        typer.echo(f"job {job.id[:12]} is {job.state}: a worker will cancel it")
