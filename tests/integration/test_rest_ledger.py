"""Profile format 2 end to end, second shape: worker processes against the loopback device
in its ledger preset (a bare key in a header of its own, 409 naming the existing ticket
on a repeated key, per-shot arrays of 0/1 with c[0] first over numbered pages), with
faults on: 503 with Retry-After, dropped connections and answers lost after the ticket
was filed."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.integration.rest_presets import (
    assert_every_job_done_once,
    drain_with_faults,
    repeat_after_lost_answer,
)


@pytest.mark.parametrize("faults", [("503",), ("drop", "lost")])
def test_ledger_preset_through_the_worker_with_faults(
    tmp_path: Path, faults: tuple[str, ...]
) -> None:
    run = drain_with_faults(
        tmp_path, shots=25, preset="ledger", queue_delay=0.3, fault_rate=0.25, faults=faults,
        seed=5, page_size=6,
    )  # fmt: skip
    assert_every_job_done_once(run)


def test_a_repeated_key_meets_409_naming_the_first_ticket(tmp_path: Path) -> None:
    stats, state, counts = repeat_after_lost_answer(
        tmp_path, "/v3/tickets", preset="ledger", queue_delay=0.2, page_size=4
    )
    assert stats["submits"] == 2 and stats["replays"] == 1 and stats["executions"] == 1
    assert state == "done" and sum(counts.values()) == 10
