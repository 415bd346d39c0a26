"""The Python API from a notebook: Jupyter runs user code inside a running event loop,
where asyncio.run() is refused; Keeper.run and Keeper.work must still work there."""

from __future__ import annotations

import asyncio
from pathlib import Path

from jobkeeper import Keeper

BELL = Path(__file__).resolve().parents[2] / "examples" / "circuits" / "bell.qasm"


def test_run_submit_work_and_wait_inside_a_running_event_loop(tmp_path: Path) -> None:
    async def cell() -> dict[str, int]:
        keeper = Keeper.open(tmp_path / "keep")
        job = keeper.run(BELL, shots=500, seed=4)
        queued = keeper.submit(BELL, shots=300, seed=5, labels={"nb"})
        keeper.work(once=True)
        assert queued.wait(timeout=30).state == "done"
        assert [j.state for j in keeper.jobs(label="nb")] == ["done"]
        counts = job.counts
        keeper.close()
        return counts

    counts = asyncio.run(cell())
    assert sum(counts.values()) == 500 and set(counts) <= {"00", "11"}  # Bell pair, N&C §1.3.6
