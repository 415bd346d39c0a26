"""The loopback device command: a real HTTP device on this machine for rehearsal."""

from __future__ import annotations

import contextlib
from typing import Annotated

import typer

from jobkeeper.cli._app import JsonOpt, KeepOpt, StoreOpt, app, echo_json, open_keeper
from jobkeeper.exceptions import ConfigError


@app.command("loopback-device")
def loopback_device(
    port: Annotated[
        int, typer.Option("--port", min=1, max=65535, help="Port on 127.0.0.1.")
    ] = 8765,
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
        typer.Option(
            "--faults", help="Fault kinds to inject, comma-separated (default: all but huge)."
        ),
    ] = None,
    slow_delay: Annotated[
        float, typer.Option("--slow-delay", help="Seconds a 'slow' fault stalls.")
    ] = 35.0,
    retry_after: Annotated[
        int, typer.Option("--retry-after", help="Seconds the device asks for on 429/503.")
    ] = 1,
    max_qubits: Annotated[int, typer.Option("--max-qubits", help="Largest circuit taken.")] = 20,
    host: Annotated[str, typer.Option("--host", help="A loopback address.")] = "127.0.0.1",
    preset: Annotated[
        str,
        typer.Option(
            "--preset",
            help="API shape: loopback, exchange (OAuth, Locations, linked pages), ledger or"
            " relay (OpenQASM 3, whole-path Locations, pages by URL).",
        ),
    ] = "loopback",
    state: Annotated[
        str | None,
        typer.Option(
            "--state",
            help="SQLite file keeping the device's jobs across restarts (default: memory).",
        ),
    ] = None,
) -> None:
    """Run the loopback device: a real HTTP device on this machine for rehearsal."""
    from jobkeeper.loopback import ALL_FAULTS, KNOWN_FAULTS, PRESETS, serve

    kinds = tuple(ALL_FAULTS) if faults is None else tuple(
        k.strip() for k in faults.split(",") if k.strip()
    )  # fmt: skip
    unknown = sorted(set(kinds) - set(KNOWN_FAULTS))
    if unknown:
        raise ConfigError(
            f"unknown fault kinds {', '.join(unknown)}; known: {', '.join(KNOWN_FAULTS)}"
        )
    if not token:
        raise ConfigError("give the device a token: --token or JOBKEEPER_LOOPBACK_TOKEN")
    if preset not in PRESETS:
        raise ConfigError(f"unknown preset {preset!r}; known: {', '.join(PRESETS)}")
    if not 0.0 <= fault_rate <= 1.0:
        raise ConfigError("--fault-rate must be between 0 and 1")
    typer.echo(
        f"loopback device on http://{host}:{port} (queue delay {queue_delay} s, "
        f"fault rate {fault_rate}, seed {seed}; jobs kept {'in ' + state if state else 'in memory'}"
        "); stats at /stats; Ctrl-C stops it",
        err=True,
    )
    # uvicorn re-raises the signal it stopped on: stopping is the normal end here.
    with contextlib.suppress(KeyboardInterrupt, typer.Abort):
        serve(
            host, port, token=token, queue_delay=queue_delay, fault_rate=fault_rate, seed=seed,
            faults=kinds, slow_delay=slow_delay, retry_after=retry_after, max_qubits=max_qubits,
            state=state, preset=preset, log_level="warning",
        )  # fmt: skip


_MARKS = {"ok": "ok", "failed": "FAILED", "skipped": "skipped"}


@app.command("probe")
def probe(
    backend: Annotated[str, typer.Argument(help="The backend to probe.", show_default=False)],
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Check a backend against its device without submitting work: reachability,
    authentication (the token request too), a calibration read, and what its profile
    declares. Exit 0 when all hold, 1 when a check fails, 3 when the device is
    unreachable."""
    keeper = open_keeper(keep, store)
    report = keeper.probe(backend)
    if json_out:
        echo_json(report.to_json())
    else:
        typer.echo(f"{report.backend} ({report.kind})")
        for check in report.checks:
            typer.echo(f"  {check.name:<15} {_MARKS[check.outcome]:<8} {check.detail}")
        if report.declared:
            typer.echo("declared by its profile:")
            for key, value in report.declared.items():
                typer.echo(f"  {key:<15} {value}")
    if report.unreachable:
        raise typer.Exit(3)
    if not report.ok:
        raise typer.Exit(1)
