"""The ``jobkeeper`` command line: thin over :mod:`jobkeeper.keeper`.

Commands parse arguments, call the library and render. One handler turns every
:class:`~jobkeeper.exceptions.JobkeeperError` into a one-line message and the exit code of
DESIGN §4: 0 success, 1 a job failed or verification found a problem, 2 bad input or
usage, 3 a backend or store could not be reached.
"""

from __future__ import annotations

import contextlib
import csv
import io
import json
import sys
from pathlib import Path
from typing import Annotated, Any

import click
import typer

from jobkeeper import __version__
from jobkeeper._render import bar_chart, job_json, shots_warning, table, when
from jobkeeper.exceptions import ConfigError, JobkeeperError
from jobkeeper.keeper import Job, Keeper

app = typer.Typer(
    name="jobkeeper",
    help="Submit, keep and prove quantum circuit runs.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

KeepOpt = Annotated[
    Path | None,
    typer.Option("--keep", envvar="JOBKEEPER_KEEP", help="Keep directory [default: ./.jobkeeper]."),
]
StoreOpt = Annotated[
    str | None,
    typer.Option(
        "--store", envvar="JOBKEEPER_STORE", help="Archive location: a postgresql:// URL."
    ),
]
JsonOpt = Annotated[bool, typer.Option("--json", help="Print JSON for scripts.")]
BackendOpt = Annotated[
    str | None, typer.Option("--backend", "-b", help="Backend name [default: statevector].")
]
ShotsOpt = Annotated[int | None, typer.Option("--shots", help="Shots [default: 1024].")]
SeedOpt = Annotated[int | None, typer.Option("--seed", help="Seed for sampling.")]
LabelOpt = Annotated[str | None, typer.Option("--label", help="A label to group jobs by.")]
RepeatOpt = Annotated[
    int, typer.Option("--repeat", help="Repeat index: ask on purpose for another sample.")
]
OverBudgetOpt = Annotated[
    bool, typer.Option("--over-budget", help="Submit even if a spending cap would be passed.")
]


def _open(keep: Path | None, store: str | None, *, create: bool = True) -> Keeper:
    return Keeper.open(keep, store=store, create=create)


def _echo_json(value: Any) -> None:
    typer.echo(json.dumps(value, indent=2, sort_keys=False))


def _progress_wait(keeper: Keeper, ids: list[str], timeout: float | None) -> None:
    if not sys.stderr.isatty():
        keeper.wait(ids, timeout=timeout)
        return
    with click.progressbar(length=len(ids), label="waiting", file=sys.stderr) as bar:
        seen = [0]

        def progress(ended: int, total: int) -> None:
            bar.update(ended - seen[0])
            seen[0] = ended

        keeper.wait(ids, timeout=timeout, progress=progress)


@app.command()
def init(keep: KeepOpt = None, store: StoreOpt = None, json_out: JsonOpt = False) -> None:
    """Create a keep: archive, configuration and signing key."""
    keeper = _open(keep, store)
    record = keeper.keyring.active_record()
    info = {
        "keep": str(keeper.path.resolve()),
        "store": keeper.store.location,
        "fingerprint": record.fingerprint,
    }
    if json_out:
        _echo_json(info)
    else:
        typer.echo(f"keep ready at {info['keep']}")
        typer.echo(f"archive: {info['store']}")
        typer.echo(f"signing key fingerprint: {record.fingerprint}")


@app.command()
def backends(keep: KeepOpt = None, store: StoreOpt = None, json_out: JsonOpt = False) -> None:
    """List the backends this keep can use."""
    keeper = _open(keep, store)
    infos = keeper.backend_infos()
    if json_out:
        _echo_json([
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
    file: Annotated[Path, typer.Argument(help="OpenQASM 2.0 file.")],
    backend: BackendOpt = None,
    shots: ShotsOpt = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Check a circuit before spending on it: metrics and whether it fits a backend."""
    from jobkeeper.preflight import preflight

    keeper = _open(keep, store)
    report = preflight(keeper, file, backend=backend, shots=shots)
    if json_out:
        _echo_json(report.to_json())
    else:
        typer.echo(report.summary())
    if not report.fits:
        raise typer.Exit(1)


def _submit_options(
    backend: str | None, shots: int | None, seed: int | None, label: str | None, repeat: int,
    exact: bool, over_budget: bool,
) -> dict[str, Any]:  # fmt: skip
    return {"backend": backend, "shots": shots, "seed": seed, "label": label,
            "repeat": repeat, "exact": exact, "over_budget": over_budget}  # fmt: skip


@app.command()
def submit(
    files: Annotated[list[Path], typer.Argument(help="OpenQASM 2.0 files.")],
    backend: BackendOpt = None,
    shots: ShotsOpt = None,
    seed: SeedOpt = None,
    label: LabelOpt = None,
    repeat: RepeatOpt = 0,
    exact: Annotated[bool, typer.Option("--exact", help="Ask for exact probabilities.")] = False,
    over_budget: OverBudgetOpt = False,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Queue jobs; a worker runs them. Jobs already done or queued are not queued again."""
    keeper = _open(keep, store)
    opts = _submit_options(backend, shots, seed, label, repeat, exact, over_budget)
    submitted = keeper.submit_many(files, **opts)
    if json_out:
        _echo_json([
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
        "backend": record.backend,
        "shots": record.shots,
        "seed": None if result is None else result.metadata.get("seed", record.seed),
        "circuit_hash": record.spec.get("circuitHash"),
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
    file: Annotated[Path, typer.Argument(help="OpenQASM 2.0 file.")],
    backend: BackendOpt = None,
    shots: ShotsOpt = None,
    seed: SeedOpt = None,
    label: LabelOpt = None,
    repeat: RepeatOpt = 0,
    exact: Annotated[bool, typer.Option("--exact", help="Print exact probabilities.")] = False,
    over_budget: OverBudgetOpt = False,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Submit one job, run it here and now, and print its result."""
    keeper = _open(keep, store)
    opts = _submit_options(backend, shots, seed, label, repeat, exact, over_budget)
    item = keeper.run_many([file], **opts)[0]
    job = item.job
    if json_out:
        _echo_json(_result_json(job, item.deduplicated))
    else:
        _print_result(job, item.deduplicated)
    if job.state != "done":
        raise typer.Exit(1)


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
    seed = result.metadata.get("seed", record.seed)
    typer.echo(f"job {record.id[:12]} on {record.backend}, {record.shots} shots, seed {seed}")
    if result.probabilities is not None:
        typer.echo("exact probabilities:")
        typer.echo(bar_chart(dict(result.probabilities), total=1.0))
        return
    typer.echo(bar_chart(dict(result.counts or {})))
    warning = shots_warning(record.shots)
    if warning:
        typer.echo(warning)


@app.command()
def worker(
    once: Annotated[bool, typer.Option("--once", help="Exit when the queue is drained.")] = False,
    concurrency: Annotated[
        int, typer.Option("--concurrency", min=1, help="Local simulations at once (processes).")
    ] = 2,
    in_flight: Annotated[
        int, typer.Option("--in-flight", min=1, help="Jobs held at once (starts and polls).")
    ] = 64,
    backend: Annotated[
        list[str] | None, typer.Option("--backend", "-b", help="Only jobs of these backends.")
    ] = None,
    lease: Annotated[float, typer.Option("--lease", help="Lease length, seconds.")] = 60.0,
    heartbeat: Annotated[float, typer.Option("--heartbeat", help="Lease renewal, seconds.")] = 10.0,
    sweep: Annotated[float, typer.Option("--sweep", help="Expired-lease sweep, seconds.")] = 15.0,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Drain the queue: run local jobs, drive remote ones, seal and archive results."""
    from jobkeeper.queue import LeasePolicy

    if not 0 < heartbeat < lease:
        raise ConfigError("--heartbeat must be positive and shorter than --lease")
    keeper = _open(keep, store)
    stats = keeper.work(
        once=once, install_signals=True, concurrency=concurrency, in_flight=in_flight,
        backends=backend or None,
        lease=LeasePolicy(lease=lease, heartbeat=heartbeat, sweep=sweep),
        announce=lambda owner: typer.echo(
            f"worker {owner} started on {keeper.store.location}", err=True
        ),
    )  # fmt: skip
    summary = {"claimed": stats.claimed, "done": stats.done, "failed": stats.failed,
               "retried": stats.retried, "cancelled": stats.cancelled,
               "lost_leases": stats.lost_leases}  # fmt: skip
    if json_out:
        _echo_json(summary)
    else:
        typer.echo(", ".join(f"{k.replace('_', ' ')} {v}" for k, v in summary.items()), err=True)


@app.command()
def jobs(
    label: LabelOpt = None,
    state: Annotated[str | None, typer.Option("--state", help="Only jobs in this state.")] = None,
    limit: Annotated[int | None, typer.Option("--limit", help="At most this many.")] = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """List jobs, oldest first."""
    from jobkeeper.queue import STATES

    if state is not None and state not in STATES:
        raise ConfigError(f"unknown state {state!r}; states are: {', '.join(STATES)}")
    keeper = _open(keep, store, create=False)
    records = [j.record for j in keeper.jobs(label=label, state=state, limit=limit)]
    if json_out:
        _echo_json([job_json(r) for r in records])
        return
    rows = [[r.id[:12], r.state, r.backend, str(r.shots), r.label or "-",
             str(r.spec.get("sourceName") or "-"), when(r.created_at)] for r in records]  # fmt: skip
    typer.echo(table(rows, ["ID", "STATE", "BACKEND", "SHOTS", "LABEL", "SOURCE", "CREATED"]))


@app.command()
def show(
    job_id: Annotated[str, typer.Argument(metavar="JOB", help="Job id or unambiguous prefix.")],
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Everything about one job: what ran, where, when, attempts, result, provenance."""
    from jobkeeper.inspect import describe_job

    keeper = _open(keep, store, create=False)
    details = describe_job(keeper, keeper.job(job_id))
    if json_out:
        _echo_json(details.data)
    else:
        typer.echo(details.text)


@app.command()
def wait(
    job_ids: Annotated[list[str], typer.Argument(metavar="JOB...", help="Job ids or prefixes.")],
    timeout: Annotated[
        float | None, typer.Option("--timeout", help="Give up after seconds.")
    ] = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Wait until jobs end (a worker must be running). Exit 1 if any failed."""
    keeper = _open(keep, store, create=False)
    ids = [keeper.job(j).id for j in job_ids]
    try:
        _progress_wait(keeper, ids, timeout)
    except TimeoutError as exc:
        typer.echo(f"jobkeeper: {exc}", err=True)
        raise typer.Exit(1) from exc
    records = keeper.store.get_many(ids)
    if json_out:
        _echo_json([{"id": r.id, "state": r.state, "error": r.error} for r in records])
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
) -> None:
    """Print a done job's counts (or exact probabilities)."""
    if fmt not in ("json", "csv"):
        raise ConfigError(f"--format must be json or csv, not {fmt!r}")
    keeper = _open(keep, store, create=False)
    job = keeper.job(job_id)
    result = job.result
    if result is None:
        raise JobkeeperError(f"job {job.id[:12]} is {job.state}: it has no counts")
    values: dict[str, Any] = dict(result.probabilities or result.counts or {})
    if fmt == "json":
        typer.echo(json.dumps(values, sort_keys=True))
        return
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
    keeper = _open(keep, store, create=False)
    job = keeper.cancel(job_id)
    if json_out:
        _echo_json({"id": job.id, "state": job.state, "cancel_requested": True})
    elif job.state == "cancelled":
        typer.echo(f"job {job.id[:12]} cancelled")
    else:
        typer.echo(f"job {job.id[:12]} is {job.state}: a worker will cancel it")


@app.command()
def keys(
    export: Annotated[
        Path | None, typer.Option("--export", help="Write the public key here.")
    ] = None,
    rotate: Annotated[bool, typer.Option("--rotate", help="Make a new active key.")] = False,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Show the signing key's public half and fingerprint; export or rotate it."""
    import base64

    keeper = _open(keep, store)
    if rotate:
        keeper.keyring.rotate()
        keeper._register_keys()
    record = keeper.keyring.active_record()
    public = base64.b64encode(record.raw).decode()
    if export is not None:
        export.write_text(
            json.dumps({"fingerprint": record.fingerprint, "public_key": public}) + "\n"
        )
    if json_out:
        _echo_json({"fingerprint": record.fingerprint, "public_key": public})
        return
    typer.echo(f"fingerprint: {record.fingerprint}")
    typer.echo(f"public key (base64, raw Ed25519): {public}")
    others = [
        r.fingerprint for r in keeper.keyring.public_keys() if r.fingerprint != record.fingerprint
    ]
    if others:
        typer.echo(f"earlier keys still trusted for old entries: {', '.join(others)}")


def _print_report(report: Any, json_out: bool, what: str) -> None:
    if json_out:
        _echo_json(report.to_dict())
    else:
        verdict = "everything holds" if report.ok else f"{len(report.problems)} problem(s) found"
        typer.echo(f"verified {report.checked} {what}: {verdict}")
        for problem in report.problems:
            typer.echo(f"  PROBLEM: {problem}")
    for warning in report.warnings:
        typer.echo(f"jobkeeper: warning: {warning}", err=True)
    if not report.ok:
        raise typer.Exit(1)


@app.command()
def verify(
    targets: Annotated[
        list[str] | None, typer.Argument(metavar="[JOB...|BUNDLE]", help="Jobs, or a bundle file.")
    ] = None,
    all_jobs: Annotated[bool, typer.Option("--all", help="Every done job in the keep.")] = False,
    key: Annotated[
        list[str] | None,
        typer.Option("--key", help="Trust only this key fingerprint (repeatable)."),
    ] = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Check signatures, counts digests, log inclusion and checkpoint consistency."""
    from jobkeeper.verification import verify_bundle_file, verify_jobs

    targets = targets or []
    if len(targets) == 1 and Path(targets[0]).is_file():
        report = verify_bundle_file(Path(targets[0]), trusted=key)
        _print_report(report, json_out, "bundle entries")
        return
    if not targets and not all_jobs:
        raise ConfigError("give job ids, a bundle file, or --all")
    keeper = _open(keep, store, create=False)
    ids = None if all_jobs else [keeper.job(t).id for t in targets]
    what = "log entries (jobs and comparisons)" if all_jobs else "jobs"
    _print_report(verify_jobs(keeper, ids, trusted=key), json_out, what)


@app.command()
def bundle(
    job_ids: Annotated[
        list[str] | None, typer.Argument(metavar="[JOB...]", help="Jobs to export.")
    ] = None,
    label: LabelOpt = None,
    output: Annotated[
        Path, typer.Option("-o", "--output", help="The bundle file to write.")
    ] = Path("jobkeeper-bundle.json"),
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Export done jobs as one file that a referee can verify offline."""
    from jobkeeper.verification import export_bundle

    keeper = _open(keep, store, create=False)
    if label is None and not job_ids:
        raise ConfigError("give job ids or --label")
    ids = [keeper.job(j).id for j in job_ids or []]
    if label is not None:
        ids += [j.id for j in keeper.jobs(label=label, state="done")]
    if not ids:
        raise ConfigError(f"no done job with label {label!r}")
    count = export_bundle(keeper, sorted(set(ids)), output)
    fp = keeper.keyring.active_record().fingerprint
    if json_out:
        _echo_json({"bundle": str(output), "jobs": count, "fingerprint": fp})
    else:
        typer.echo(f"wrote {count} job(s) to {output}")
        typer.echo(f"a referee verifies it with: jobkeeper verify {output} --key {fp}")


def _print_judgement(judgement: Any, json_out: bool) -> None:
    if json_out:
        _echo_json(judgement.to_json())
    else:
        typer.echo(judgement.summary())
        typer.echo(f"archived and signed as comparison {judgement.record.id[:12]}")
    if judgement.record.verdict == "different":
        raise typer.Exit(1)


AlphaOpt = Annotated[
    float, typer.Option("--alpha", min=1e-9, max=0.5, help="Significance level of the test.")
]


@app.command()
def rerun(
    job_id: Annotated[str, typer.Argument(metavar="JOB", help="The job to run again.")],
    backend: BackendOpt = None,
    seed: Annotated[
        int | None, typer.Option("--seed", help="Another seed [default: the one used].")
    ] = None,
    alpha: AlphaOpt = 0.01,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Run a job again from its signed manifest alone, and judge the two results."""
    from jobkeeper.judging import rerun as do_rerun

    keeper = _open(keep, store, create=False)
    _print_judgement(do_rerun(keeper, keeper.job(job_id), backend=backend, seed=seed,
                              alpha=alpha), json_out)  # fmt: skip


@app.command()
def compare(
    job_a: Annotated[str, typer.Argument(metavar="A", help="A job.")],
    job_b: Annotated[str | None, typer.Argument(metavar="[B]", help="Another job.")] = None,
    ideal: Annotated[
        bool, typer.Option("--ideal", help="Compare A with its circuit's exact distribution.")
    ] = False,
    alpha: AlphaOpt = 0.01,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Are two jobs' counts (or a job and the ideal) consistent? Exit 1 if different."""
    from jobkeeper.judging import compare_ideal, compare_jobs

    if (job_b is None) == (not ideal):
        raise ConfigError("give two jobs, or one job and --ideal")
    keeper = _open(keep, store, create=False)
    a = keeper.job(job_a)
    if ideal:
        judgement = compare_ideal(keeper, a, alpha=alpha)
    else:
        assert job_b is not None
        judgement = compare_jobs(keeper, a, keeper.job(job_b), alpha=alpha)
    _print_judgement(judgement, json_out)


@app.command("loopback-device")
def loopback_device(
    port: Annotated[int, typer.Option("--port", help="Port on 127.0.0.1.")] = 8765,
    token: Annotated[
        str | None,
        typer.Option(
            "--token",
            envvar="JOBKEEPER_LOOPBACK_TOKEN",
            help="Bearer token clients must send (better from the environment variable).",
        ),
    ] = None,
    queue_delay: Annotated[
        float, typer.Option("--queue-delay", help="Seconds each job waits before it runs.")
    ] = 2.0,
    fault_rate: Annotated[
        float, typer.Option("--fault-rate", help="Share of requests given an injected fault.")
    ] = 0.0,
    seed: Annotated[int, typer.Option("--seed", help="Seed of faults and device choices.")] = 0,
    faults: Annotated[
        str | None,
        typer.Option("--faults", help="Fault kinds to inject, comma-separated [default: all]."),
    ] = None,
    slow_delay: Annotated[
        float, typer.Option("--slow-delay", help="Seconds a 'slow' fault stalls.")
    ] = 35.0,
    retry_after: Annotated[
        int, typer.Option("--retry-after", help="Seconds the device asks for on 429/503.")
    ] = 1,
    max_qubits: Annotated[int, typer.Option("--max-qubits", help="Largest circuit taken.")] = 20,
    host: Annotated[str, typer.Option("--host", help="A loopback address.")] = "127.0.0.1",
) -> None:
    """Run the loopback device: a real HTTP device on this machine for rehearsal."""
    from jobkeeper.loopback import ALL_FAULTS, serve

    kinds = tuple(ALL_FAULTS) if faults is None else tuple(
        k.strip() for k in faults.split(",") if k.strip()
    )  # fmt: skip
    unknown = sorted(set(kinds) - set(ALL_FAULTS))
    if unknown:
        raise ConfigError(
            f"unknown fault kinds {', '.join(unknown)}; known: {', '.join(ALL_FAULTS)}"
        )
    if not token:
        raise ConfigError("give the device a token: --token or JOBKEEPER_LOOPBACK_TOKEN")
    if not 0.0 <= fault_rate <= 1.0:
        raise ConfigError("--fault-rate must be between 0 and 1")
    typer.echo(
        f"loopback device on http://{host}:{port} (queue delay {queue_delay} s, "
        f"fault rate {fault_rate}, seed {seed}); stats at /stats; Ctrl-C stops it",
        err=True,
    )
    # uvicorn re-raises the signal it stopped on: stopping is the normal end here.
    with contextlib.suppress(KeyboardInterrupt, click.exceptions.Abort):
        serve(
            host, port, token=token, queue_delay=queue_delay, fault_rate=fault_rate, seed=seed,
            faults=kinds, slow_delay=slow_delay, retry_after=retry_after, max_qubits=max_qubits,
            log_level="warning",
        )  # fmt: skip


@app.callback(invoke_without_command=True)
def _root(
    version: Annotated[bool, typer.Option("--version", help="Print the version.")] = False,
) -> None:
    if version:
        typer.echo(f"jobkeeper {__version__}")
        raise typer.Exit(0)


def main(argv: list[str] | None = None) -> int:
    """Entry point: every jobkeeper error becomes one line on stderr and an exit code."""
    try:
        # Without standalone mode, click returns the code of a typer.Exit instead of exiting.
        code = app(args=argv, prog_name="jobkeeper", standalone_mode=False)
    except JobkeeperError as exc:
        typer.echo(f"jobkeeper: {exc}", err=True)
        return exc.exit_code
    except click.exceptions.Exit as exc:
        return int(exc.exit_code or 0)
    except click.ClickException as exc:
        typer.echo(f"jobkeeper: {exc.format_message()}", err=True)
        return 2
    except click.exceptions.Abort:
        typer.echo("jobkeeper: interrupted", err=True)
        return 130
    except KeyboardInterrupt:
        typer.echo("jobkeeper: interrupted", err=True)
        return 130
    return code if isinstance(code, int) else 0


if __name__ == "__main__":
    sys.exit(main())
