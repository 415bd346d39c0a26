"""The typer app, the options every command shares, and small helpers of the
command line (no logic: that lives in the library)."""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

if TYPE_CHECKING:
    from jobkeeper.job import Job
    from jobkeeper.keeper import Keeper

app = typer.Typer(
    name="jobkeeper",
    help="Submit, keep and prove quantum circuit runs.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

# --keep and --store are taken before the command (`jobkeeper --keep K jobs`) and after it
# (`jobkeeper jobs --keep K`). The environment variables belong to the root options only:
# were they on the command's options too, JOBKEEPER_KEEP would silently beat a --keep
# given before the command. Precedence: after the command, before it, environment.
KEEP_HELP = "Keep directory (or JOBKEEPER_KEEP; default ./.jobkeeper)."
STORE_HELP = "Archive location: a postgresql:// URL (or JOBKEEPER_STORE)."
KeepOpt = Annotated[Path | None, typer.Option("--keep", help=KEEP_HELP, show_default=False)]
StoreOpt = Annotated[str | None, typer.Option("--store", help=STORE_HELP, show_default=False)]


@dataclass
class RootOptions:
    """What was given before the command; the root callback sets it on every run."""

    keep: Path | None = None
    store: str | None = None


ROOT = RootOptions()
JsonOpt = Annotated[bool, typer.Option("--json", help="Print JSON for scripts.")]
BackendOpt = Annotated[
    str | None,
    typer.Option(
        "--backend",
        "-b",
        help="Backend name (default: defaults.backend of the keep's config.toml).",
    ),
]
ShotsOpt = Annotated[
    int | None,
    typer.Option("--shots", help="Shots (default: defaults.shots of the keep's config.toml)."),
]
SeedOpt = Annotated[int | None, typer.Option("--seed", help="Seed for sampling.")]
LabelOpt = Annotated[str | None, typer.Option("--label", help="A label to group jobs by.")]
LabelsOpt = Annotated[
    list[str] | None, typer.Option("--label", help="A label to group jobs by (repeatable).")
]
SetOpt = Annotated[
    list[str] | None,
    typer.Option(
        "--set",
        metavar="NAME=VALUE",
        help="A value for one of the program's input parameters (repeatable), typed as the "
        "program declares it.",
        show_default=False,
    ),
]
RepeatOpt = Annotated[
    int, typer.Option("--repeat", help="Repeat index: ask on purpose for another sample.")
]
OverBudgetOpt = Annotated[
    bool, typer.Option("--over-budget", help="Submit even if a spending cap would be passed.")
]


def open_keeper(keep: Path | None, store: str | None, *, create: bool = True) -> Keeper:
    from jobkeeper.keeper import Keeper

    return Keeper.open(
        keep if keep is not None else ROOT.keep,
        store=store if store is not None else ROOT.store,
        create=create,
    )


def echo_json(value: Any) -> None:
    typer.echo(json.dumps(value, indent=2, sort_keys=False))


def progress_wait(keeper: Keeper, ids: list[str], timeout: float | None) -> list[Job]:
    """``keeper.wait`` with a bar on a terminal; on a timeout, the TimeoutError says in
    which state the jobs still are (a queued job waits for a worker, not for a device)."""
    from jobkeeper.cli._progress import counting

    with counting("waiting", len(ids)) as bar:

        def progress(ended: int, total: int) -> None:
            bar.advance_to(ended)

        try:
            return keeper.wait(ids, timeout=timeout, progress=progress)
        except TimeoutError as exc:
            raise TimeoutError(_not_ended(keeper, ids, timeout)) from exc


def _not_ended(keeper: Keeper, ids: list[str], timeout: float | None) -> str:
    from jobkeeper.queue import JobState

    states: dict[JobState, int] = {}
    for job_id in ids:
        state = JobState(keeper.job(job_id).state)
        if not state.terminal:
            states[state] = states.get(state, 0) + 1
    parts = [f"{n} job{'s' if n > 1 else ''} still {state}" for state, n in states.items()]
    hint = " (no worker has claimed it yet: is one running?)" if JobState.QUEUED in states else ""
    return f"gave up after {timeout:g} s: " + ", ".join(parts) + hint
