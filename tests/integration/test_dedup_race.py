"""The same job submitted twice, and by 16 processes racing: one job, one execution.

Uniqueness from a unique index plus INSERT … ON CONFLICT, tested with 16+ concurrent
same-key submitters (queue-reliability notes §4 and §6.9: common practice)."""

from __future__ import annotations

import multiprocessing as mp
from pathlib import Path

from jobkeeper import Keeper
from jobkeeper.testing import executions
from tests.integration.helpers import circuit_text, write_recording_keep

RACERS = 16


def _submit(keep: str, barrier) -> tuple[str, bool]:  # runs in a child process
    keeper = Keeper.open(keep)
    barrier.wait(timeout=60)
    item = keeper.submit_many([circuit_text(0.25)], backend="rec", shots=100, seed=5)[0]
    keeper.close()
    return item.job.id, item.deduplicated


def test_submitting_twice_gives_one_job_and_one_execution(tmp_path: Path) -> None:
    keep, ledger = tmp_path / "keep", tmp_path / "ledger"
    write_recording_keep(keep, ledger)
    with Keeper.open(keep) as keeper:
        first = keeper.submit_many([circuit_text(0.5)], backend="rec", shots=100)[0]
        second = keeper.submit_many([circuit_text(0.5)], backend="rec", shots=100)[0]
        assert not first.deduplicated and second.deduplicated
        assert first.job.id == second.job.id
        keeper.work(once=True, local_executor="thread")
        third = keeper.submit_many([circuit_text(0.5)], backend="rec", shots=100)[0]
        assert third.deduplicated and third.job.id == first.job.id and third.job.state == "done"
        keeper.work(once=True, local_executor="thread")
    assert len(executions(ledger)) == 1


def test_sixteen_racing_submitters_get_one_job(tmp_path: Path) -> None:
    keep, ledger = tmp_path / "keep", tmp_path / "ledger"
    write_recording_keep(keep, ledger)
    Keeper.open(keep).close()  # create the keep once, as 'jobkeeper init' would
    ctx = mp.get_context("fork")  # the children open their own connections
    with ctx.Manager() as manager:
        barrier = manager.Barrier(RACERS)
        with ctx.Pool(RACERS) as pool:
            outcomes = pool.starmap(_submit, [(str(keep), barrier)] * RACERS, chunksize=1)
    ids = {job_id for job_id, _ in outcomes}
    assert len(ids) == 1
    assert sum(not dedup for _, dedup in outcomes) == 1
    with Keeper.open(keep) as keeper:
        assert len(keeper.jobs()) == 1
        keeper.work(once=True, local_executor="thread")
        assert keeper.jobs()[0].state == "done"
    assert len(executions(ledger)) == 1
