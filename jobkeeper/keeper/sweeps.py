"""Sweeps: one program, many bindings of its inputs, each point a job.

A sweep is planned by :mod:`jobkeeper.sweeps` (axes as a grid, a points file, or values
given from Python), bound point by point from one parsed template, and queued with its
record in one transaction. :class:`SweepRun` is what a notebook holds: its points' jobs,
a way to wait for them (running them here when asked) and a table of their counts.
"""

from __future__ import annotations

import itertools
import os
import uuid
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from numbers import Real
from typing import TYPE_CHECKING, Any, Unpack

from jobkeeper.exceptions import ConfigError
from jobkeeper.hashing import digest_of
from jobkeeper.ids import JOB, SWEEP, resolve
from jobkeeper.job import Job, Submitted
from jobkeeper.keeper.runs import KeepRuns, _options
from jobkeeper.queue import TERMINAL_STATES
from jobkeeper.store.sweep_records import SWEEP_PREFIX

if TYPE_CHECKING:
    from jobkeeper.circuit import Template
    from jobkeeper.options import SubmitFields, SubmitOptions
    from jobkeeper.store.sweep_records import SweepPoint, SweepRecord
    from jobkeeper.sweeps import PointsTable, Sweep


@dataclass
class SweepRun:
    """A recorded sweep: its record, its points (in order) and, just after a submission,
    what the submission did with each point's job."""

    keeper: KeepSweeps
    record: SweepRecord
    points: list[SweepPoint]
    submitted: list[Submitted] | None = None

    @property
    def id(self) -> str:
        return self.record.id

    def __len__(self) -> int:
        return len(self.points)

    def __repr__(self) -> str:
        return f"<SweepRun {self.id[:12]} of {len(self.points)} points>"

    @property
    def jobs(self) -> list[Job]:
        """Each point's job, in point order, as the archive holds it now."""
        return self.keeper.point_jobs(self.points)

    def wait(self, timeout: float | None = None, *, run_here: bool = True) -> list[Job]:
        """Block until every point's job has ended; with ``run_here`` (the default) this
        process runs the points not yet ended itself (a worker elsewhere may share them:
        claims never overlap). TimeoutError after ``timeout`` seconds."""
        ids = [point.job_id for point in self.points]
        if run_here:
            pending = [job.id for job in self.jobs if job.state not in TERMINAL_STATES]
            if pending:
                self.keeper.work(once=True, timeout=timeout, ids=pending, idle_sleep=0.05)
        return self.keeper.wait(ids, timeout=timeout)

    def table(self, *, texts: bool = False) -> list[dict[str, Any]]:
        """One row per point and outcome: the inputs (as numbers, or with ``texts`` as
        the text each value was given as), ``outcome`` and ``count`` (``probability``
        for exact jobs); each job's counts are checked against its signed statement as
        they are read. Points not done have no rows."""
        return self.keeper.sweep_table(self, texts=texts)


class KeepSweeps(KeepRuns):
    """Sweeps in and out of the queue."""

    def submit_sweep(
        self, program: str | os.PathLike[str], options: SubmitOptions | None = None, /, *,
        axes: Sequence[str] = (), points: str | os.PathLike[str] | None = None,
        progress: Callable[[int, int], None] | None = None, **fields: Unpack[SubmitFields],
    ) -> SweepRun:  # fmt: skip
        """Queue a sweep of ``program``: ``axes`` (``NAME=START:STOP:COUNT``, a grid) or
        the points file ``points`` (CSV, header = input names), with ``inputs``
        (``NAME=VALUE``) fixed. The sweep's record and every point's job are written in
        one transaction; the same sweep submitted again adds nothing."""
        from jobkeeper.sweeps import plan_sweep, read_points

        chosen = _options(options, fields)
        template = self.load_template(program)
        table = None if points is None else read_points(template.inputs, os.fspath(points))
        plan = plan_sweep(template.inputs, settings=chosen.inputs, axes=axes, table=table)
        return self._queue_sweep(template, plan, chosen, plan.describe(), progress)

    def sweep(
        self, program: str | os.PathLike[str], values: Mapping[str, Sequence[Any]], /,
        **fields: Unpack[SubmitFields],
    ) -> SweepRun:  # fmt: skip
        """Queue a sweep over the Cartesian product of ``values`` (input name → the
        numbers it takes, the first name's changing slowest); ``inputs`` (``NAME=VALUE``)
        fix the other inputs. ``run.wait()`` runs it here; ``run.table()`` reads it."""
        from jobkeeper.sweeps import plan_sweep

        chosen = _options(None, fields)
        template = self.load_template(program)
        table = _values_table(values)
        plan = plan_sweep(template.inputs, settings=chosen.inputs, table=table)
        definition = {
            "fixed": plan.fixed.texts(),
            "values": {
                name: [_number_text(name, v) for v in vals] for name, vals in values.items()
            },
            "points": len(plan),
        }
        return self._queue_sweep(template, plan, chosen, definition, None)

    def _queue_sweep(
        self, template: Template, plan: Sweep, options: SubmitOptions,
        definition: dict[str, Any], progress: Callable[[int, int], None] | None,
    ) -> SweepRun:  # fmt: skip
        from jobkeeper.spec import bindings_document
        from jobkeeper.store.sweep_records import NewSweep

        target = self._target(options)
        new_jobs = []
        total = len(plan.points)
        for number, point in enumerate(plan.points, start=1):
            new_jobs.append(target.job(template.bind(point.numbers()), point, template))
            if progress is not None and (number % 50 == 0 or number == total):
                progress(number, total)
        key = digest_of({
            "templateHash": template.source_hash,
            "definition": definition,
            "jobKeys": [job.job_key for job in new_jobs],
        })  # fmt: skip
        record = NewSweep(
            id=SWEEP_PREFIX + uuid.uuid4().hex, sweep_key=key,
            template_hash=template.source_hash, template_text=template.text,
            definition=definition, labels=tuple(sorted(options.labels)),
            points=tuple(bindings_document(point) for point in plan.points),
        )  # fmt: skip
        self._check_budget(new_jobs, options)
        sweep_id, results = self.store.enqueue_sweep(record, new_jobs)
        run = self.sweep_run(sweep_id)
        run.submitted = self._submitted(results)
        return run

    # -- reading ----------------------------------------------------------------------------

    def resolve_id(self, id_or_prefix: str, kinds: Sequence[str] = (JOB, SWEEP)) -> tuple[str, str]:
        """(kind, full id) of the job or sweep ``id_or_prefix`` names (see
        :mod:`jobkeeper.ids`)."""
        return resolve(self.store, id_or_prefix, kinds)

    def sweep_run(self, id_or_prefix: str) -> SweepRun:
        """A recorded sweep by id or unambiguous prefix."""
        record = self.store.get_sweep(id_or_prefix)
        return SweepRun(self, record, self.store.sweep_points(record.id))

    def point_jobs(self, points: Sequence[SweepPoint]) -> list[Job]:
        """The jobs of these points, in their order."""
        records = {r.id: r for r in self.store.get_many([p.job_id for p in points])}
        return [Job(self.store, records[p.job_id], self._trusted_keys) for p in points]

    def sweep_table(self, run: SweepRun, *, texts: bool = False) -> list[dict[str, Any]]:
        """:meth:`SweepRun.table`."""
        rows: list[dict[str, Any]] = []
        for point, job in zip(run.points, self.point_jobs(run.points), strict=True):
            if job.state != "done":
                continue
            probabilities = job.probabilities
            values = probabilities if probabilities is not None else job.counts
            column = "probability" if probabilities is not None else "count"
            inputs: dict[str, Any] = point.texts() if texts else point.numbers()
            rows.extend({**inputs, "outcome": outcome, column: values[outcome]}
                        for outcome in sorted(values))  # fmt: skip
        return rows


def _number_text(name: str, value: Any) -> str:
    """A Python number as an input's value text: what a person would have typed."""
    if isinstance(value, bool) or not isinstance(value, Real):
        raise ConfigError(f"input {name}: {value!r} is not a number")
    if isinstance(value, int):
        return str(value)
    return repr(float(value))


def _values_table(values: Mapping[str, Sequence[Any]]) -> PointsTable:
    """The grid of ``values`` as a points table (each value as its text), so that it is
    typed and checked as a points file's cells are."""
    from jobkeeper.sweeps import MAX_POINTS, PointsTable

    if not values:
        raise ConfigError("a sweep needs at least one input with values")
    columns = []
    total = 1
    for name, items in values.items():
        if isinstance(items, (str, bytes)) or not isinstance(items, Sequence):
            items = list(items) if not isinstance(items, (str, bytes)) else [items]
        texts = [_number_text(name, item) for item in items]
        if not texts:
            raise ConfigError(f"input {name}: no values (an empty sweep)")
        total *= len(texts)
        if total > MAX_POINTS:
            raise ConfigError(f"the sweep has more than {MAX_POINTS} points")
        columns.append(texts)
    rows = tuple((number, row) for number, row in enumerate(itertools.product(*columns), start=1))
    digest = digest_of({name: column for name, column in zip(values, columns, strict=True)})
    return PointsTable("values", digest, tuple(values), rows)
