"""Commands that show a keep to people: plot (figures) and serve (the web view)."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from jobkeeper.cli._app import JsonOpt, KeepOpt, StoreOpt, app, echo_json, open_keeper
from jobkeeper.cli._progress import activity

ForceOpt = Annotated[bool, typer.Option("--force", help="Replace the file if it exists.")]


@app.command()
def plot(
    record_id: Annotated[str, typer.Argument(metavar="ID", help="A job or a comparison.")],
    output: Annotated[
        Path, typer.Option("-o", "--output", help="The figure to write: .svg, .png or .pdf.")
    ],
    caption: Annotated[
        bool, typer.Option("--caption", help="Print the record id and bundle digest under it.")
    ] = False,
    force: ForceOpt = False,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Draw a job's histogram, or a comparison's two histograms side by side, for print.
    The figure's metadata names the record and the SHA-256 of its bundle."""
    from jobkeeper.web.records import figure_format
    from jobkeeper.web.records import plot as draw

    figure_format(output)  # a wrong suffix is refused before the keep is opened
    keeper = open_keeper(keep, store, create=False)
    with activity(f"drawing {output}"):
        source = draw(keeper, record_id, output, caption=caption, force=force)
    if json_out:
        echo_json({"path": str(output), "kind": source.kind, "id": source.record_id,
                   "bundle_sha256": source.bundle_digest})  # fmt: skip
    else:
        typer.echo(f"wrote {source.kind} {source.record_id[:12]} to {output}")
        typer.echo(f"its bundle's digest (in the figure's metadata): {source.bundle_digest}")


@app.command()
def serve(
    host: Annotated[
        str, typer.Option("--host", help="Address to listen on (loopback unless a token is set).")
    ] = "127.0.0.1",
    port: Annotated[int, typer.Option("--port", min=1, max=65535, help="Port.")] = 8600,
    token_env: Annotated[
        str | None,
        typer.Option(
            "--token-env",
            help="Name of the environment variable holding the access token (needed for "
            "any address other machines can reach).",
            show_default=False,
        ),
    ] = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
) -> None:
    """A read-only web view of the keep: overview, jobs, figures, the signed log."""
    import os

    from jobkeeper.exceptions import ConfigError
    from jobkeeper.web.server import check_address
    from jobkeeper.web.server import serve as run_view

    token = None
    if token_env is not None:
        token = os.environ.get(token_env) or None
        if token is None:
            raise ConfigError(f"--token-env {token_env}: that environment variable is not set")
    check_address(host, token)  # before the keep is opened, and before anything binds
    keeper = open_keeper(keep, store, create=False)
    shown = f"[{host}]" if ":" in host else host
    typer.echo(f"serving a read-only view of {keeper.path} on http://{shown}:{port}/ "
               "(Ctrl-C stops it)", err=True)  # fmt: skip
    run_view(keeper, host, port, token=token)
