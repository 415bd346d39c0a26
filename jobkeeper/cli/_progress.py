"""Progress on a terminal for work that can take more than a second.

Shown on stderr only when stderr is a terminal, and erased when the work ends, so that
what a command prints (on stdout, or its one-line error) reads the same with or without
it; in a pipe or a log file nothing is drawn at all. rich draws it (it comes with
typer); it is imported only when something is drawn, not by every command.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any, Protocol

# How often a drawn display refreshes: the spinner's elapsed time stays readable and the
# refresh thread costs nothing measurable.
REFRESH_PER_SECOND = 8


def drawing() -> bool:
    """Whether progress is drawn: stderr is a terminal and the user did not opt out
    (``NO_COLOR`` does not opt out; ``TERM=dumb`` does, as it cannot redraw a line)."""
    return sys.stderr.isatty() and os.environ.get("TERM") != "dumb"


class Activity(Protocol):
    """Something under way: its line of text can change while it runs."""

    def say(self, text: str) -> None: ...


class Counting(Protocol):
    """Work of ``total`` parts: ``advance_to`` says how many have ended."""

    def advance_to(self, done: int, *, note: str = "", total: int | None = None) -> None: ...


class _Silent:
    def say(self, text: str) -> None:
        pass

    def advance_to(self, done: int, *, note: str = "", total: int | None = None) -> None:
        pass


def _console() -> Any:
    from rich.console import Console

    return Console(stderr=True)


@contextmanager
def activity(text: str) -> Iterator[Activity]:
    """A spinner with the elapsed time beside ``text`` while the block runs."""
    if not drawing():
        yield _Silent()
        return
    from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

    progress = Progress(
        SpinnerColumn(),
        TextColumn("{task.description}"),
        TimeElapsedColumn(),
        console=_console(),
        transient=True,
        refresh_per_second=REFRESH_PER_SECOND,
    )
    with progress:
        task = progress.add_task(text, total=None)

        class _Drawn:
            def say(self, new: str) -> None:
                progress.update(task, description=new)

        yield _Drawn()


@contextmanager
def counting(text: str, total: int) -> Iterator[Counting]:
    """A bar of ``total`` parts with the count and the elapsed time."""
    if not drawing():
        yield _Silent()
        return
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        Progress,
        TextColumn,
        TimeElapsedColumn,
    )

    progress = Progress(
        TextColumn("{task.description}"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        TextColumn("{task.fields[note]}"),
        console=_console(),
        transient=True,
        refresh_per_second=REFRESH_PER_SECOND,
    )
    with progress:
        task = progress.add_task(text, total=total, note="")

        class _Drawn:
            def advance_to(self, done: int, *, note: str = "", total: int | None = None) -> None:
                # A total learnt on the way (a sweep's points are counted once planned).
                if total is not None:
                    progress.update(task, total=total)
                progress.update(task, completed=done, note=note)

        yield _Drawn()
