"""The profile language's format 2 end to end: worker processes against the loopback
device in its exchange preset (OAuth 2.0 client credentials with tokens that live one
second, form-encoded submissions answered with a Location, 303 on a repeated key,
numeric status codes, per-shot hexadecimal samples over pages linked by RFC 8288
headers), with faults on: 503 with Retry-After, tokens expiring early, dropped
connections and answers lost after the run was accepted."""

from __future__ import annotations

from collections import Counter
from pathlib import Path

import pytest

from tests.integration.rest_presets import (
    assert_every_job_done_once,
    drain_with_faults,
    repeat_after_lost_answer,
)


@pytest.mark.parametrize("faults", [("503",), ("expire",), ("drop", "lost")])
def test_exchange_preset_through_the_worker_with_faults(
    tmp_path: Path, faults: tuple[str, ...]
) -> None:
    run = drain_with_faults(
        tmp_path, preset="exchange", queue_delay=0.3, fault_rate=0.25, faults=faults, seed=3,
        token_ttl=1.0, page_size=7,
    )  # fmt: skip
    assert_every_job_done_once(run)
    assert len(run.secrets) >= 3  # the secret, and tokens that expired and were fetched again


def test_a_repeated_submission_is_answered_303_and_joins_the_first_run(tmp_path: Path) -> None:
    stats, state, counts = repeat_after_lost_answer(
        tmp_path, "/v2/runs", shots=30, preset="exchange", queue_delay=0.2, page_size=5
    )
    assert stats["submits"] == 2 and stats["replays"] == 1 and stats["executions"] == 1
    assert state == "done" and sum(counts.values()) == 30
    # the layout splits the registers: a Bell pair in a (00 or 11), a coin in b
    assert {key.split("|")[0] for key in counts} <= {"00", "11"}
    assert Counter(len(key) for key in counts) == {4: len(counts)}
