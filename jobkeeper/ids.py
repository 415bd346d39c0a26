"""Ids of the things a command may name, and resolving a prefix across their kinds.

A job id is 32 hexadecimal digits; a sweep id starts with its kind prefix ``sw-`` (so
the two never collide, whatever their length). A command that accepts several kinds
resolves what it is given against each of them: exactly one match is the answer; none is
JobNotFound naming the kinds looked in; matches of two kinds are AmbiguousJobId (give
more characters). Both are exit 2.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING

from jobkeeper.exceptions import AmbiguousJobId, JobNotFound
from jobkeeper.store.sweep_records import SWEEP_PREFIX

if TYPE_CHECKING:
    from jobkeeper.store import Store

JOB = "job"
SWEEP = "sweep"


def _lookups(store: Store) -> dict[str, Callable[[str], str]]:
    return {JOB: lambda text: store.get(text).id, SWEEP: lambda text: store.get_sweep(text).id}


def _fits(kind: str, text: str) -> bool:
    """Whether ``text`` could begin an id of ``kind``."""
    text = text.strip().lower()
    if kind == SWEEP:
        return bool(text) and text[: len(SWEEP_PREFIX)] == SWEEP_PREFIX[: len(text)]
    return bool(text) and all(ch in "0123456789abcdef" for ch in text)


def resolve(store: Store, id_or_prefix: str, kinds: Sequence[str] = (JOB,)) -> tuple[str, str]:
    """(kind, full id) of the one thing of ``kinds`` that ``id_or_prefix`` names."""
    lookups = _lookups(store)
    found: list[tuple[str, str]] = []
    missed: list[JobNotFound] = []
    for kind in kinds:
        try:
            found.append((kind, lookups[kind](id_or_prefix)))
        except JobNotFound as exc:
            if _fits(kind, id_or_prefix):
                missed.append(exc)
    if not found and len(missed) == 1:
        raise missed[0]  # the one kind such an id could be: its own message
    if not found:
        raise JobNotFound(f"no {' or '.join(kinds)} matches {id_or_prefix!r}")
    if len(found) > 1:
        named = " and ".join(f"{kind} {full[:12]}" for kind, full in found)
        raise AmbiguousJobId(f"{id_or_prefix!r} matches {named}; give more characters of the id")
    return found[0]
