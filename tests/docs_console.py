"""Console examples in README.md and DEVELOPERS.md run in the test suite (with sybil).

How a block is marked:

- Every fenced block whose info string is exactly ``console`` runs, top to bottom. Lines
  starting with ``$ `` are commands; the lines after one, up to the next ``$ `` or the end
  of the block, are what it must print (stdout and stderr together, as on a terminal).
  A ``# comment`` after a command is for the reader and is dropped (shell rules).
- A block that only lists commands (it cannot run: a daemon, ids from another keep) is
  preceded by ``<!-- skip: next -->``, sybil's own marker. Skipping is visible in review.
- Commands must start with ``jobkeeper``; they run through the installed entry point
  (the ``jobkeeper`` script beside this Python) in a fresh temporary project directory
  per document, holding a link to the repository's ``examples/``, with the default keep
  (``./.jobkeeper``; ``JOBKEEPER_KEEP`` is removed from the environment). Blocks of one
  document share that directory in reading order, as a reader's shell would.

What is normalised before comparing, and only this (``NORMALISE`` below): job ids and
other lowercase hex runs of 12 or more characters (they depend on the keep's key and
clock), ISO 8601 times, and the temporary directory's path, which the documents show as
``/home/you/project``. Trailing spaces and trailing blank lines do not count. Everything
else, figures included, must match: a README that shows 507/493 must print 507/493.

To update a block after an intended change of output: run the commands in a fresh
directory holding a link to ``examples/`` and paste what they print; the failure message
shows the difference as a diff.
"""

from __future__ import annotations

import difflib
import os
import re
import shlex
import subprocess
import sys
import tempfile
from pathlib import Path
from typing import Any

from sybil import Example, Sybil
from sybil.parsers.markdown import CodeBlockParser, SkipParser

ROOT = Path(__file__).resolve().parent.parent
ENTRY_POINT = Path(sys.executable).parent / "jobkeeper"

#: (pattern, replacement) applied in order to expected and actual output alike.
NORMALISE: tuple[tuple[re.Pattern[str], str], ...] = (
    (re.compile(r"\d{4}-\d\d-\d\d[T ]\d\d:\d\d:\d\d(?:\.\d+)?(?:Z|[+-]\d\d:?\d\d)?"), "<time>"),
    (re.compile(r"\b[0-9a-f]{12,}\b"), "<hex>"),
)
#: A command that runs longer than this has hung (no README example takes a second).
TIMEOUT_S = 60


#: How the documents show the temporary project directory.
PROJECT = "/home/you/project"


def normalise(text: str, project: str) -> str:
    text = text.replace(project, PROJECT)
    for pattern, replacement in NORMALISE:
        text = pattern.sub(replacement, text)
    lines = [line.rstrip() for line in text.splitlines()]
    while lines and not lines[-1]:
        lines.pop()
    return "\n".join(lines)


def split_session(source: str) -> list[tuple[str, str]]:
    """A console block as (command, expected output) pairs."""
    steps: list[tuple[str, list[str]]] = []
    for line in source.splitlines():
        if line.startswith("$ "):
            steps.append((line[2:], []))
        elif steps:
            steps[-1][1].append(line)
        elif line.strip():
            raise ValueError(f"output before the first command: {line!r}")
    return [(command, "\n".join(lines)) for command, lines in steps]


def run_console(example: Example) -> None:
    project: str = example.namespace["project"]
    env = {key: value for key, value in os.environ.items() if key != "JOBKEEPER_KEEP"}
    env.update(NO_COLOR="1", COLUMNS="100")
    for command, expected in split_session(str(example.parsed)):
        argv = shlex.split(command, comments=True)
        if not argv or argv[0] != "jobkeeper":
            raise ValueError(f"only jobkeeper commands run here, not {command!r}")
        done = subprocess.run(
            [str(ENTRY_POINT), *argv[1:]],
            cwd=project,
            env=env,
            stdout=subprocess.PIPE,
            stderr=subprocess.STDOUT,
            text=True,
            timeout=TIMEOUT_S,
            check=False,
        )
        want, got = normalise(expected, project), normalise(done.stdout, project)
        if want != got:
            diff = "\n".join(
                difflib.unified_diff(
                    want.splitlines(), got.splitlines(), "documented", "printed", lineterm=""
                )
            )
            raise AssertionError(
                f"`{command}` (exit {done.returncode}) prints other than documented:\n{diff}"
            )


def _setup(namespace: dict[str, Any]) -> None:
    directory = tempfile.TemporaryDirectory(prefix="jk-docs-")
    (Path(directory.name) / "examples").symlink_to(ROOT / "examples", target_is_directory=True)
    namespace["directory"] = directory
    namespace["project"] = directory.name


def _teardown(namespace: dict[str, Any]) -> None:
    namespace["directory"].cleanup()


def documents() -> Sybil:
    """The sybil collector for the repository's Markdown documents."""
    return Sybil(
        parsers=[CodeBlockParser(language="console", evaluator=run_console), SkipParser()],
        path=str(ROOT),
        patterns=["README.md", "DEVELOPERS.md"],
        setup=_setup,
        teardown=_teardown,
    )
