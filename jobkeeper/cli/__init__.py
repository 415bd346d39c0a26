"""The ``jobkeeper`` command line: thin over :mod:`jobkeeper.keeper`.

Commands parse arguments, call the library and render. :mod:`jobkeeper.cli._entry` turns
every :class:`~jobkeeper.exceptions.JobkeeperError` and every usage error of the framework
into a one-line message and the exit code of DESIGN §4: 0 success, 1 a job failed or
verification found a problem, 2 bad input or usage, 3 a backend or store could not be
reached.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated

import typer

from jobkeeper._version import __version__
from jobkeeper.cli import _device, _jobs, _proof, _submit, _trust, _web  # noqa: F401  (they register commands)
from jobkeeper.cli._app import KEEP_HELP, ROOT, STORE_HELP, app
from jobkeeper.cli._entry import run_app
from jobkeeper.exceptions import ConfigError

__all__ = ["app", "main"]

# Help lists the commands in the order of the workflow (DESIGN §4), not module order.
_ORDER = ["init", "backends", "check", "submit", "run", "worker", "jobs", "show", "wait",
          "counts", "cancel", "keys", "verify", "bundle", "export", "rerun", "compare",
          "plot", "serve", "report", "probe", "loopback-device"]  # fmt: skip
app.registered_commands.sort(
    key=lambda c: _ORDER.index(c.name or (c.callback.__name__ if c.callback else ""))
)


@app.callback(invoke_without_command=True)
def _root(
    ctx: typer.Context,
    keep: Annotated[
        Path | None,
        typer.Option("--keep", envvar="JOBKEEPER_KEEP", help=KEEP_HELP, show_default=False),
    ] = None,
    store: Annotated[
        str | None,
        typer.Option("--store", envvar="JOBKEEPER_STORE", help=STORE_HELP, show_default=False),
    ] = None,
    version: Annotated[bool, typer.Option("--version", help="Print the version.")] = False,
) -> None:
    ROOT.keep, ROOT.store = keep, store
    if version:
        typer.echo(f"jobkeeper {__version__}")
        raise typer.Exit(0)
    if ctx.invoked_subcommand is None:
        raise ConfigError("give a command (see 'jobkeeper --help')")


def main(argv: list[str] | None = None) -> int:
    """Entry point: every error becomes one line on stderr and an exit code."""
    return run_app(app, argv)


if __name__ == "__main__":
    sys.exit(main())
