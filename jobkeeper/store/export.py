"""A tidy copy of jobs and their counts for analysis: one SQLite file that any SQLite tool
or dataframe library reads (``pandas.read_sql``, ``polars.read_database``, ``sqlite3``).

Tables (one fact per row, one row per thing):

- ``jobs``: one row per job: id, state, backend, shots, seed, repeat, labels (a JSON
  array), bindings (a JSON object of the circuit's input values; empty until programs
  take inputs), circuit hash, source name, job key, exact (0/1), submitted and finished
  times (RFC 3339, UTC);
- ``counts``: one row per job and outcome (``job_id``, ``outcome``, ``count``, and one
  column per classical register, ``reg_<name>``, holding that register's value in binary),
  for sampled results; ``probabilities``: the same for exact runs (``probability``); the
  ``jobs`` table's ``count_keys`` says how each job's keys are laid out;
- ``export``: one row saying what this file is: when and from which keep it was written,
  the label chosen, and that it is an unsigned copy (the signed record stays in the keep).

The file is written under a temporary name beside the target and renamed into place, so
a reader never sees half a file. sqlite-utils does the writing: table creation with
types, keys and foreign keys, and batched inserts.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import json
import sqlite3
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from jobkeeper.counts import RegisterLayout
from jobkeeper.exceptions import StoreError
from jobkeeper.outputs import atomic_output
from jobkeeper.store import JobRecord, Store

NOTE = (
    "An unsigned copy for analysis. The signed record of each job is in the keep: "
    "check it with 'jobkeeper verify'."
)


@dataclass(frozen=True)
class ExportSummary:
    """What was written: the file, how many jobs, count rows and probability rows."""

    path: Path
    jobs: int
    counts: int
    probabilities: int


def _when(seconds: float | None) -> str | None:
    if seconds is None:
        return None
    return dt.datetime.fromtimestamp(seconds, tz=dt.UTC).isoformat(timespec="milliseconds")


def job_row(record: JobRecord, layout: RegisterLayout | None = None) -> dict[str, Any]:
    spec = record.spec
    return {
        "id": record.id,
        "state": str(record.state),
        "backend": spec.backend,
        "shots": spec.shots,
        # The seed the job ran with (resolved at submission; the one its manifest signs).
        "seed": spec.seed,
        "repeat": spec.repeat,
        "labels": json.dumps(list(record.labels)),
        # Jobs carry no input bindings yet (parameterised circuits come with sweeps).
        "bindings": json.dumps({}),
        "circuit_hash": spec.circuit_hash,
        "source_name": spec.source_name,
        "job_key": record.job_key,
        "exact": int(spec.exact),
        "submitted_at": _when(record.created_at),
        "finished_at": _when(record.finished_at),
        "count_keys": None if layout is None else json.dumps(layout.describe()),
    }


JOB_COLUMNS: dict[str, type] = {
    "id": str, "state": str, "backend": str, "shots": int, "seed": int, "repeat": int,
    "labels": str, "bindings": str, "circuit_hash": str, "source_name": str, "job_key": str,
    "exact": int, "submitted_at": str, "finished_at": str, "count_keys": str,
}  # fmt: skip


def export_jobs(
    store: Store,
    records: Sequence[JobRecord],
    path: Path,
    *,
    guarded: Iterable[Path] = (),
    force: bool = False,
    label: str | None = None,
    origin: str | None = None,
    layouts: Mapping[str, RegisterLayout] | None = None,
) -> ExportSummary:
    """Write ``records`` and their results to the SQLite file ``path`` (see the module
    docstring; ``layouts``: each done job's register layout, as its manifest signs it).
    Refuses what :func:`jobkeeper.outputs.check_output` refuses."""
    import sqlite_utils

    found = {"counts": 0, "probabilities": 0}
    layouts = layouts or {}

    def outcomes(kind: str) -> Iterator[dict[str, Any]]:
        for record in records:
            result = store.result(record.id)
            values = None if result is None else getattr(result, kind)
            column = "count" if kind == "counts" else "probability"
            layout = layouts.get(record.id)
            for outcome, value in sorted((values or {}).items()):
                found[kind] += 1
                row = {"job_id": record.id, "outcome": outcome, column: value}
                if layout is not None:
                    row.update(zip(layout.columns(), layout.split(outcome), strict=True))
                yield row

    try:
        with (
            atomic_output(path, guarded=guarded, force=force) as partial,
            contextlib.closing(sqlite3.connect(partial)) as conn,
        ):
            db = sqlite_utils.Database(conn)
            db.table("jobs").create(JOB_COLUMNS, pk="id", not_null={"id", "state", "backend"})
            db.table("jobs").insert_all(job_row(r, layouts.get(r.id)) for r in records)
            for kind, column, kind_type in (
                ("counts", "count", int),
                ("probabilities", "probability", float),
            ):
                db.table(kind).create(
                    {"job_id": str, "outcome": str, column: kind_type},
                    pk=("job_id", "outcome"),
                    foreign_keys=[("job_id", "jobs", "id")],
                )
                # alter: each register adds its reg_<name> column when first met
                db.table(kind).insert_all(outcomes(kind), batch_size=5000, alter=True)
            db.table("export").insert(
                {"written_at": _when(dt.datetime.now(tz=dt.UTC).timestamp()),
                 "keep": origin, "label": label, "jobs": len(records), "note": NOTE}
            )  # fmt: skip
            conn.commit()
    except sqlite3.Error as exc:
        raise StoreError(f"cannot write {path}: {exc}") from exc
    target = Path(path).expanduser().resolve()
    return ExportSummary(target, len(records), found["counts"], found["probabilities"])
