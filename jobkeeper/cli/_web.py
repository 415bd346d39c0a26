"""Commands that show a keep to people: plot (figures), serve (the web view) and report
(a referee's page on a bundle)."""

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


@app.command()
def report(
    bundle_path: Annotated[Path, typer.Argument(metavar="BUNDLE", help="A bundle file.")],
    output: Annotated[Path, typer.Option("-o", "--output", help="The HTML file to write.")] = Path(
        "report.html"
    ),
    key: Annotated[
        list[str] | None,
        typer.Option("--key", help="Trust only this full key fingerprint (repeatable)."),
    ] = None,
    force: ForceOpt = False,
    keep: KeepOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Write a referee's report on a bundle: one self-contained HTML file saying what was
    verified and how, with every record's figure and signed manifest."""
    from jobkeeper.cli._app import ROOT
    from jobkeeper.cli._proof import _keep_trust
    from jobkeeper.config import DEFAULT_KEEP
    from jobkeeper.exceptions import ConfigError
    from jobkeeper.outputs import guarded_paths
    from jobkeeper.web.report import write_report

    if not bundle_path.is_file():
        raise ConfigError(f"no bundle file {bundle_path}")
    # The keep at hand (if any) lends its trusted keys, as `verify BUNDLE` does, and is
    # never written into.
    trust_set = _keep_trust(keep)
    place = keep if keep is not None else ROOT.keep if ROOT.keep is not None else DEFAULT_KEEP
    guarded = guarded_paths(place) if place.is_dir() else ()
    with activity(f"verifying {bundle_path} and writing {output}"):
        summary = write_report(bundle_path, output, trusted=key, trust_set=trust_set,
                               guarded=guarded, force=force)  # fmt: skip
    if json_out:
        echo_json({"path": str(output), "records": summary.records, "ok": summary.ok,
                   "signers": list(summary.signers)})  # fmt: skip
    else:
        verdict = "verified" if summary.ok else "VERIFICATION FAILED (the report says why)"
        typer.echo(f"wrote {output}: {summary.records} record(s), {verdict}")
    if not summary.ok:
        raise typer.Exit(1)
