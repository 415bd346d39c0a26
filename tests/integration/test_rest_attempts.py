"""Every try against a device is an attempt row: the REST adapter's quick retries inside
one call included. The loopback device injects faults on a seeded schedule and counts
them itself, so the archive's attempt rows are checked against a count kept outside the
worker (each injected fault fails exactly one HTTP request: one try)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.cli import main
from jobkeeper.loopback.testing import running_device
from jobkeeper.queue import RetryPolicy
from tests.integration.helpers import circuit_text
from tests.integration.test_rest_worker import rest_keep

FAST = RetryPolicy(base=0.01, cap=0.05)


def test_injected_faults_are_each_one_attempt_row_and_show_lists_them(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    # Faults that fail a request and are retried (500, a dropped connection); seeded.
    with running_device(queue_delay=0.05, fault_rate=0.35, faults=("500", "drop"), seed=4) as dev:
        monkeypatch.setenv(dev.token_env, dev.token)
        keep = rest_keep(tmp_path, dev)
        with Keeper.open(keep) as keeper:
            submitted = keeper.run_many(
                [circuit_text(0.05 * i) for i in range(12)], backend="dev", shots=20, retry=FAST
            )
            jobs = [s.job for s in submitted]
            assert all(j.state == "done" for j in jobs), [j.record.error for j in jobs]
            history = {j.id: j.attempts for j in jobs}
            rows = [a for j in jobs for a in history[j.id]]
        faults = dev.stats()["faults"]
    injected = sum(faults.values())
    assert injected >= 7  # the faults really happened (seeded: the same count every run)
    assert len(rows) == injected, (faults, len(rows))
    inner = [a for a in rows if a.in_call]
    assert inner, "no retry inside a call was recorded"
    for attempts in history.values():  # numbered 1, 2, ... in the order they happened
        numbers = [a.number for a in attempts]
        assert numbers == list(range(1, len(numbers) + 1))
        times = [a.at for a in attempts]
        assert times == sorted(times)
    assert {a.error_class for a in rows} == {"TransientBackendError"}
    assert all("injected fault" in a.message or "request failed" in a.message for a in rows)

    tried_id = max(history, key=lambda i: len(history[i]))
    tried = history[tried_id]
    assert main(["show", tried_id, "--keep", str(keep), "--json"]) == 0
    shown = json.loads(capsys.readouterr().out)
    assert len(shown["attempt_history"]) == len(tried)
    assert [a["in_call"] for a in shown["attempt_history"]] == [a.in_call for a in tried]
    assert main(["show", tried_id, "--keep", str(keep)]) == 0
    text = capsys.readouterr().out
    assert "attempts:" in text and "TransientBackendError" in text
    if any(a.in_call for a in tried):
        assert "(retried within the call)" in text
