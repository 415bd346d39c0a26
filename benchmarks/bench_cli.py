"""Start-up of the command line against a bare typer app with the same command names.

The bare app is a script with no jobkeeper code at all: every command of ``jobkeeper``,
each with a ``--json`` option and a one-line help, so its ``--help`` costs what typer
and its help renderer cost on this machine. Measured in one run, in interleaved rounds
(the machine's load drifts), each figure the median of 5 wall-clock times of a fresh
interpreter:

* ``jobkeeper --help`` against the bare app's ``--help``: target ≤ 1.3×;
* ``jobkeeper jobs --json`` on a keep of 1,000 jobs against the same bare ``--help``:
  target ≤ 3× (it opens the keep, reads its configuration and lists the jobs).

The keep is filled once before the clock, through the library in one submission
(``Keeper.submit_many``, a batched insert), with 1,000 distinct circuits.
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROUNDS = 5
HELP_TARGET = 1.3
JOBS_TARGET = 3.0

# The installed entry point does exactly this (pyproject's [project.scripts]).
JOBKEEPER = "import sys; from jobkeeper.cli import main; sys.exit(main())"


def bare_app(names: list[str]) -> str:
    commands = "\n".join(
        f'@app.command("{name}")\n'
        f"def cmd_{i}(json_out: Annotated[bool, typer.Option('--json', help='JSON.')] = False"
        f") -> None:\n"
        f'    """The {name} command."""\n'
        for i, name in enumerate(names)
    )
    return (
        "from typing import Annotated\n\nimport typer\n\n"
        "app = typer.Typer(no_args_is_help=True, add_completion=False)\n\n"
        f"{commands}\n"
        'if __name__ == "__main__":\n    app()\n'
    )


def command_names() -> list[str]:
    from jobkeeper.cli import app

    return [
        c.name or (c.callback.__name__.replace("_", "-") if c.callback else "")
        for c in app.registered_commands
    ]


def seed_keep(keep: Path, n: int) -> None:
    from jobkeeper import Keeper

    texts = [
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c[2];\n'
        f"rz({0.001 * i!r}) q[0];\nh q[0];\ncx q[0],q[1];\nmeasure q -> c;\n"
        for i in range(n)
    ]
    with Keeper.open(keep) as keeper:
        keeper.submit_many(texts, shots=100, seed=1)


def timed(argv: list[str], cwd: Path) -> float:
    start = time.perf_counter()
    proc = subprocess.run(argv, cwd=cwd, capture_output=True, check=False)
    elapsed = time.perf_counter() - start
    if proc.returncode != 0:
        raise SystemExit(f"{argv} failed: {proc.stderr.decode(errors='replace')[-500:]}")
    return elapsed


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true", help="200 jobs instead of 1,000")
    args = parser.parse_args()
    n = 200 if args.quick else 1000
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        script = root / "bare.py"
        script.write_text(bare_app(command_names()))
        keep = root / "keep"
        seed_keep(keep, n)
        runs = {
            "bare --help": [sys.executable, str(script), "--help"],
            "jobkeeper --help": [sys.executable, "-c", JOBKEEPER, "--help"],
            "jobkeeper jobs --json": [
                sys.executable, "-c", JOBKEEPER, "jobs", "--json", "--keep", str(keep),
            ],
        }  # fmt: skip
        out = subprocess.run(runs["jobkeeper jobs --json"], capture_output=True, check=True)
        assert out.stdout.count(b'"id"') == n, "the keep does not list every job"
        for argv in runs.values():  # warm the file cache and the bytecode caches
            timed(argv, root)
        times: dict[str, list[float]] = {label: [] for label in runs}
        for _ in range(ROUNDS):
            for label, argv in runs.items():
                times[label].append(timed(argv, root))
    median = {label: statistics.median(values) for label, values in times.items()}
    for label, values in times.items():
        print(f"  {label}: median {median[label]:.3f} s ({', '.join(f'{v:.3f}' for v in values)})")
    bare = median["bare --help"]
    for label, target in (("jobkeeper --help", HELP_TARGET),
                          ("jobkeeper jobs --json", JOBS_TARGET)):  # fmt: skip
        ratio = median[label] / bare
        verdict = "PASS" if ratio <= target else "MISS"
        extra = f" on {n} jobs" if "jobs" in label else ""
        print(f"  {label}{extra} / bare --help: {ratio:.2f} (target <= {target}) {verdict}")


if __name__ == "__main__":
    main()
