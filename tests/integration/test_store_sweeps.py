"""The Store contract for sweeps, on both stores: a sweep and its points' jobs are written
in one transaction, the same sweep again adds nothing, a point whose job is found under
its key points at that job, and prefixes resolve."""

from __future__ import annotations

import dataclasses
import uuid

import pytest

from jobkeeper.exceptions import AmbiguousJobId, JobNotFound
from jobkeeper.ids import resolve
from jobkeeper.store import JobFilter, NewJob, Store
from jobkeeper.store.sweep_records import NewSweep
from jobkeeper.sweeps import Bindings, Value
from tests.integration.test_store_contract import SPEC


def points(n: int) -> list[list[dict]]:
    return [[{"name": "theta", "text": str(i), "value": i}] for i in range(n)]


def sweep_of(n: int, key: str = "sha256:sweep", sweep_id: str | None = None) -> NewSweep:
    return NewSweep(
        id=sweep_id or "sw-" + uuid.uuid4().hex, sweep_key=key, template_hash="sha256:t",
        template_text="OPENQASM 3.0;", definition={"axes": [], "points": n}, labels=("scan",),
        points=tuple(points(n)),
    )  # fmt: skip


def jobs_of(n: int, prefix: str = "k") -> list[NewJob]:
    out = []
    for i in range(n):
        bound = Bindings([("theta", Value(str(i), i))])
        spec = dataclasses.replace(SPEC, bindings=bound, template_hash="sha256:t",
                                   template_text="OPENQASM 3.0;")  # fmt: skip
        out.append(NewJob(id=uuid.uuid4().hex, job_key=f"{prefix}{i}", spec=spec, max_attempts=3))
    return out


def test_a_sweep_and_its_jobs_are_recorded_together(store: Store) -> None:
    sweep_id, results = store.enqueue_sweep(sweep_of(3), jobs_of(3))
    assert [created for _, created in results] == [True, True, True]
    record = store.get_sweep(sweep_id[:8])
    assert record.id == sweep_id and record.size == 3 and record.labels == ("scan",)
    assert record.definition == {"axes": [], "points": 3}
    found = store.sweep_points(sweep_id)
    assert [p.index for p in found] == [0, 1, 2]
    assert [p.job_id for p in found] == [r.id for r, _ in results]
    assert found[2].numbers() == {"theta": 2} and found[2].texts() == {"theta": "2"}
    # The job's own spec keeps its bindings and template (the archived document).
    job = store.get(found[1].job_id)
    assert job.spec.bindings == Bindings([("theta", Value("1", 1))])
    assert job.spec.template_hash == "sha256:t"
    assert {r.id for r in store.list_jobs(sweep=sweep_id)} == {p.job_id for p in found}
    assert store.count_jobs(JobFilter(sweep=sweep_id)) == 3
    assert store.sweeps_of([found[0].job_id]) == {found[0].job_id: [(sweep_id, 0)]}


def test_the_same_sweep_again_adds_nothing(store: Store) -> None:
    first_id, _ = store.enqueue_sweep(sweep_of(2), jobs_of(2))
    again_id, results = store.enqueue_sweep(sweep_of(2), jobs_of(2))
    assert again_id == first_id and [created for _, created in results] == [False, False]
    assert store.count_jobs(JobFilter()) == 2
    assert len(store.sweep_points(first_id)) == 2


def test_a_point_found_under_its_key_points_at_that_job(store: Store) -> None:
    # A literal twin queued before the sweep: the sweep's point is that job.
    ((twin, _),) = store.enqueue(jobs_of(1))
    sweep_id, results = store.enqueue_sweep(sweep_of(2), jobs_of(2))
    assert results[0] == (results[0][0], False) and results[0][0].id == twin.id
    assert store.sweep_points(sweep_id)[0].job_id == twin.id


def test_sweep_prefixes_resolve_across_kinds(store: Store) -> None:
    _, results = store.enqueue_sweep(sweep_of(1, sweep_id="sw-aaaa1"), jobs_of(1))
    store.enqueue_sweep(sweep_of(1, key="sha256:other", sweep_id="sw-aaaa2"), jobs_of(1, "j"))
    job_id = results[0][0].id
    assert resolve(store, "sw-aaaa1", ("job", "sweep")) == ("sweep", "sw-aaaa1")
    assert resolve(store, job_id[:10], ("job", "sweep")) == ("job", job_id)
    with pytest.raises(AmbiguousJobId, match="several sweeps"):
        resolve(store, "sw-aaaa", ("job", "sweep"))
    with pytest.raises(JobNotFound, match="no sweep matches"):
        resolve(store, "sw-b", ("job", "sweep"))
    with pytest.raises(JobNotFound, match="no job or sweep"):
        resolve(store, "zz", ("job", "sweep"))
    with pytest.raises(JobNotFound):
        store.get_sweep("0123")
