"""Running the typer app: every way a command line can end becomes an exit code and at
most one line on stderr.

The command-line framework reports bad usage (unknown command or option, a missing or
malformed argument, an out-of-range value) by raising its own exception. Which class that
is depends on the installed version: typer up to 0.1x uses the ``click`` package, whose
base is ``click.ClickException``; typer 0.2x carries its own copy of click as
``typer._click``, whose exceptions derive from ``typer.TyperException`` and are *not*
``click.ClickException`` even when the ``click`` package is installed beside it (other
dependencies pull it in). A handler written against one of them silently misses the
other, and the user sees a traceback. So the base classes are found from typer's own
public ``typer.BadParameter`` at run time, whatever copy of click it uses.
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from typing import Any

import typer

from jobkeeper.exceptions import JobkeeperError

USAGE_EXIT = 2


def usage_error_bases() -> tuple[type[BaseException], ...]:
    """The framework's base classes of usage errors, for the typer that is installed."""
    bases: set[type[BaseException]] = {
        cls
        for cls in typer.BadParameter.__mro__
        if cls.__name__ in ("ClickException", "TyperException")
    }
    typer_base = getattr(typer, "TyperException", None)
    if isinstance(typer_base, type) and issubclass(typer_base, BaseException):
        bases.add(typer_base)
    # When the click package is in use it is already imported; importing it only to name
    # its base class would cost start-up time for nothing.
    click = sys.modules.get("click")
    if click is not None:
        bases.add(click.ClickException)
    return tuple(bases)


def _exit_classes() -> tuple[type[BaseException], ...]:
    classes: set[type[BaseException]] = {typer.Exit}
    click = sys.modules.get("click")
    if click is not None:
        classes.add(click.exceptions.Exit)
    return tuple(classes)


def _abort_classes() -> tuple[type[BaseException], ...]:
    classes: set[type[BaseException]] = {typer.Abort, KeyboardInterrupt}
    click = sys.modules.get("click")
    if click is not None:
        classes.add(click.exceptions.Abort)
    return tuple(classes)


def one_line(text: str) -> str:
    """A message on one line: the framework's and some libraries' messages wrap."""
    return " ".join(text.split())


def _usage_line(exc: BaseException) -> str:
    format_message: Callable[[], str] | None = getattr(exc, "format_message", None)
    message = one_line(format_message() if format_message else str(exc))
    ctx = getattr(exc, "ctx", None)
    path = getattr(ctx, "command_path", None) or "jobkeeper"
    return f"{path}: {message} (see '{path} --help')"


def _is_help_request(exc: BaseException) -> bool:
    # `jobkeeper` alone: the framework raises a usage error that carries the whole help.
    return type(exc).__name__ == "NoArgsIsHelpError"


def run_app(app: Callable[..., Any], argv: list[str] | None) -> int:
    """Run ``app`` on ``argv`` (``sys.argv[1:]`` when None) and return the exit code."""
    usage_errors = usage_error_bases()
    try:
        # Without standalone mode the framework returns or raises instead of exiting, so
        # every ending passes through here.
        code = app(args=argv, prog_name="jobkeeper", standalone_mode=False)
    except JobkeeperError as exc:
        typer.echo(f"jobkeeper: {one_line(str(exc))}", err=True)
        return exc.exit_code
    except _exit_classes() as exc:
        return int(getattr(exc, "exit_code", 0) or 0)
    except _abort_classes():
        typer.echo("jobkeeper: interrupted", err=True)
        return 130
    except usage_errors as exc:
        if _is_help_request(exc):
            # The help is printed as it is made (by rich) or returned as text (plain).
            ctx = getattr(exc, "ctx", None)
            text = ctx.get_help() if ctx is not None else str(exc)
            if text:
                typer.echo(text, err=True)
        else:
            typer.echo(_usage_line(exc), err=True)
        return USAGE_EXIT
    return code if isinstance(code, int) else 0
