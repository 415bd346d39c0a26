"""Commands that submit, run, list and inspect jobs."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

from jobkeeper.cli._app import (
    BackendOpt,
    JsonOpt,
    KeepOpt,
    LabelOpt,
    SetOpt,
    ShotsOpt,
    StoreOpt,
    app,
    echo_json,
    open_keeper,
    progress_wait,
)
from jobkeeper.cli._render import counts_csv, job_json, table, when
from jobkeeper.exceptions import ConfigError, JobkeeperError

if TYPE_CHECKING:
    pass


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
    sweep: Annotated[
        str | None, typer.Option("--sweep", metavar="ID", help="Only the points of this sweep.")
    ] = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """List jobs, oldest first."""
    from jobkeeper.queue import JobState

    if state is not None and state not in set(JobState):
        raise ConfigError(f"unknown state {state!r}; states are: {', '.join(JobState)}")
    keeper = open_keeper(keep, store, create=False)
    records = [j.record for j in keeper.jobs(label=label, state=state, limit=limit, sweep=sweep)]
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
    job_id: Annotated[
        str, typer.Argument(metavar="ID", help="Job or sweep id, or an unambiguous prefix.")
    ],
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Everything about one job: what ran, where, when, attempts, result, provenance (or a
    sweep: its template, definition and points)."""
    from jobkeeper.cli._show import describe_job

    keeper = open_keeper(keep, store, create=False)
    kind, full = keeper.resolve_id(job_id)
    if kind == "sweep":
        from jobkeeper.cli._sweeps import describe_sweep

        data, text = describe_sweep(keeper.sweep_run(full))
        echo_json(data) if json_out else typer.echo(text)
        return
    details = describe_job(keeper, keeper.job(full))
    if json_out:
        echo_json(details.data)
    else:
        typer.echo(details.text)
    if not details.data["verification"]["ok"]:
        raise typer.Exit(1)  # what was shown does not match what is signed


@app.command()
def wait(
    job_ids: Annotated[
        list[str], typer.Argument(metavar="ID", help="Job or sweep ids, or prefixes.")
    ],
    timeout: Annotated[
        float | None, typer.Option("--timeout", help="Give up after seconds.")
    ] = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Wait until jobs (or a sweep's points) end (a worker must be running). Exit 1 if any
    failed."""
    keeper = open_keeper(keep, store, create=False)
    ids = []
    for given in job_ids:
        kind, full = keeper.resolve_id(given)
        ids += [p.job_id for p in keeper.sweep_run(full).points] if kind == "sweep" else [full]
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
    job_id: Annotated[
        str, typer.Argument(metavar="ID", help="Job or sweep id, or an unambiguous prefix.")
    ],
    fmt: Annotated[str, typer.Option("--format", help="json or csv.")] = "json",
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Print a done job's counts (or exact probabilities) with their key layout: JSON
    unless --format csv (a column per register, reg_<name>, beside the key). For a
    sweep, every done point's: in CSV one row per point and outcome."""
    if fmt not in ("json", "csv"):
        raise ConfigError(f"--format must be json or csv, not {fmt!r}")
    if json_out and fmt != "json":
        raise ConfigError("--json and --format csv exclude each other")
    keeper = open_keeper(keep, store, create=False)
    kind, full = keeper.resolve_id(job_id)
    if kind == "sweep":
        from jobkeeper.cli._sweeps import sweep_counts

        typer.echo(sweep_counts(keeper.sweep_run(full), fmt), nl=False)
        return
    job = keeper.job(full)
    result = job.result
    if result is None:
        raise JobkeeperError(f"job {job.id[:12]} is {job.state}: it has no counts")
    layout = job.registers
    kind = "probabilities" if result.probabilities else "counts"
    values: dict[str, Any] = dict(result.probabilities or result.counts or {})
    if fmt == "json":
        echo_json({"count_keys": layout.describe(), kind: dict(sorted(values.items()))})
        return
    column = "probability" if result.probabilities else "count"
    typer.echo(counts_csv(values, layout, column), nl=False)


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
