"""Sweeps in the archive: a sweep's record (:class:`SweepRecord`) and its points
(:class:`SweepPoint`), each point a job with the bindings it was made with.

A sweep is written with its jobs in one transaction (``Store.enqueue_sweep``). Its key
(``sweep_key``) names what was asked — the template, the sweep's definition and the job
keys of its points — so the same sweep submitted again finds its record and adds nothing.
A point whose job is found under the same key (already done, or a literal twin) points
at that job. Nothing here is signed: a point's bindings are also signed in its job's
manifest (or its entry in a batch statement); the sweep record groups and names them.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from jobkeeper.exceptions import AmbiguousJobId, JobNotFound
from jobkeeper.store import sql

#: The kind prefix of sweep ids: a job id is hexadecimal, so the two never collide.
SWEEP_PREFIX = "sw-"


@dataclass(frozen=True)
class NewSweep:
    """A sweep to record with its jobs: ``points`` holds each point's bindings as
    archived (:func:`jobkeeper.spec.bindings_document`), in the order of the jobs."""

    id: str
    sweep_key: str
    template_hash: str
    template_text: str
    #: what defines it, JSON-ready (:meth:`jobkeeper.sweeps.Sweep.describe`)
    definition: dict[str, Any]
    labels: tuple[str, ...]
    points: tuple[list[dict[str, Any]], ...]


@dataclass(frozen=True)
class SweepRecord:
    """One row of the sweeps table."""

    id: str
    sweep_key: str
    template_hash: str
    template_text: str
    definition: dict[str, Any]
    labels: tuple[str, ...]
    size: int
    created_at: float


@dataclass(frozen=True)
class SweepPoint:
    """A point of a sweep: its index (from 0), its job, its bindings as archived."""

    index: int
    job_id: str
    bindings: list[dict[str, Any]]

    def numbers(self) -> dict[str, Any]:
        """Input name → number, in declaration order."""
        return {item["name"]: item["value"] for item in self.bindings}

    def texts(self) -> dict[str, str]:
        """Input name → the value's text as given."""
        return {item["name"]: item["text"] for item in self.bindings}


def one_by_prefix(rows: Sequence[Any], text: str, given: str, kind: str) -> Any:
    """The one row (of at most two, by id) an id prefix names: JobNotFound for none,
    AmbiguousJobId for two unless the first is the whole id."""
    if not rows:
        raise JobNotFound(f"no {kind} matches {given!r}")
    if len(rows) > 1 and rows[0][0] != text:
        raise AmbiguousJobId(f"{given!r} matches several {kind}s; give more characters of the id")
    return rows[0]


def sweep_row(sweep: NewSweep) -> tuple[Any, ...]:
    """The parameters of ``sql.INSERT_SWEEP``."""
    return (sweep.id, sweep.sweep_key, sweep.template_hash, sweep.template_text,
            json.dumps(sweep.definition, sort_keys=True), json.dumps(list(sweep.labels)),
            len(sweep.points))  # fmt: skip


def point_rows(sweep_id: str, points: Sequence[list[dict[str, Any]]],
               job_ids: Sequence[str]) -> list[tuple[Any, ...]]:  # fmt: skip
    """The parameters of ``sql.UPSERT_SWEEP_POINT``, one per point."""
    return [(sweep_id, index, job_id, json.dumps(point))
            for index, (point, job_id) in enumerate(zip(points, job_ids, strict=True))]  # fmt: skip


def sweep_of(row: Sequence[Any]) -> SweepRecord:
    id_, key, template_hash, template_text, definition, labels, size, created = row
    return SweepRecord(id_, key, template_hash, template_text, json.loads(definition),
                       tuple(json.loads(labels)), int(size), float(created))  # fmt: skip


class SweepReads:
    """Reading a store's sweeps; the store provides ``_read``."""

    def _read(self, statement: str, params: Sequence[Any] = (), **extra: str) -> list[Any]:
        raise NotImplementedError

    def get_sweep(self, id_or_prefix: str) -> SweepRecord:
        """A sweep by id or unambiguous prefix (JobNotFound, AmbiguousJobId)."""
        text = id_or_prefix.strip().lower()
        if not text or text[: len(SWEEP_PREFIX)] != SWEEP_PREFIX[: len(text)]:
            raise JobNotFound(f"no sweep {id_or_prefix!r}: a sweep id starts with {SWEEP_PREFIX}")
        rows = self._read(sql.SWEEP_BY_PREFIX, (len(text), text))
        return sweep_of(one_by_prefix(rows, text, id_or_prefix, "sweep"))

    def sweep_points(self, sweep_id: str) -> list[SweepPoint]:
        """A sweep's points, in order."""
        rows = self._read(sql.SWEEP_POINTS, (sweep_id,))
        return [
            SweepPoint(int(idx), job_id, json.loads(bindings)) for idx, job_id, bindings in rows
        ]

    def sweeps_of(self, job_ids: Sequence[str]) -> dict[str, list[tuple[str, int]]]:
        """Job id → the (sweep id, point index) pairs it is a point of."""
        out: dict[str, list[tuple[str, int]]] = {}
        for start in range(0, len(job_ids), 500):
            chunk = list(job_ids[start : start + 500])
            marks = ", ".join("?" for _ in chunk)
            for job_id, sweep_id, idx in self._read(sql.SWEEPS_OF_JOBS, chunk, marks=marks):
                out.setdefault(job_id, []).append((sweep_id, int(idx)))
        return out
