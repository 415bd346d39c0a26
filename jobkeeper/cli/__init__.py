"""The ``jobkeeper`` command line: thin over :mod:`jobkeeper.keeper`.

Commands parse arguments, call the library and render. One handler turns every
:class:`~jobkeeper.exceptions.JobkeeperError` into a one-line message and the exit code of
DESIGN §4: 0 success, 1 a job failed or verification found a problem, 2 bad input or
usage, 3 a backend or store could not be reached.
"""

from __future__ import annotations

import sys
from typing import Annotated

import click
import typer

from jobkeeper._version import __version__
from jobkeeper.cli import _device, _jobs, _proof  # noqa: F401  (they register commands)
from jobkeeper.cli._app import app
from jobkeeper.exceptions import JobkeeperError

__all__ = ["app", "main"]

# Help lists the commands in the order of the workflow (DESIGN §4), not module order.
_ORDER = ["init", "backends", "check", "submit", "run", "worker", "jobs", "show", "wait",
          "counts", "cancel", "keys", "verify", "bundle", "rerun", "compare",
          "loopback-device"]  # fmt: skip
app.registered_commands.sort(
    key=lambda c: _ORDER.index(c.name or (c.callback.__name__ if c.callback else ""))
)


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
