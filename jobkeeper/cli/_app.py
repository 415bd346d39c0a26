"""The typer app, the options every command shares, and small helpers of the
command line (no logic: that lives in the library)."""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Annotated, Any

import click
import typer

from jobkeeper.keeper import Keeper

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


def open_keeper(keep: Path | None, store: str | None, *, create: bool = True) -> Keeper:
    return Keeper.open(keep, store=store, create=create)


def echo_json(value: Any) -> None:
    typer.echo(json.dumps(value, indent=2, sort_keys=False))


def progress_wait(keeper: Keeper, ids: list[str], timeout: float | None) -> None:
    if not sys.stderr.isatty():
        keeper.wait(ids, timeout=timeout)
        return
    with click.progressbar(length=len(ids), label="waiting", file=sys.stderr) as bar:
        seen = [0]

        def progress(ended: int, total: int) -> None:
            bar.update(ended - seen[0])
            seen[0] = ended

        keeper.wait(ids, timeout=timeout, progress=progress)
