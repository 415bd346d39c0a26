"""Retries as the queue-reliability notes (§3) describe common practice: transient faults
retry with back-off and each attempt is kept; a delay the backend asks for wins;
permanent faults fail at once with the reason; a job out of attempts fails with its whole
history. Real SQLite file, real worker loop."""

from __future__ import annotations

import base64
import json
from pathlib import Path

from jobkeeper import Keeper
from jobkeeper.queue import RetryPolicy
from tests.integration.helpers import circuit_text

FAST = RetryPolicy(base=0.01, cap=0.05)


def flaky_keep(tmp_path: Path, **options: object) -> Path:
    keep = tmp_path / "keep"
    keep.mkdir()
    lines = ["[defaults]", f"max_attempts = {options.pop('max_attempts', 10)}", "",
             "[backends.flaky]", 'adapter = "flaky"',
             f'ledger_dir = "{tmp_path / "ledger"}"']  # fmt: skip
    for key, value in options.items():
        lines.append(f"{key} = {json.dumps(value)}")
    (keep / "config.toml").write_text("\n".join(lines) + "\n")
    return keep


def manifest(job) -> dict:
    entry = job.log_entry
    return json.loads(base64.b64decode(json.loads(entry.envelope)["payload"]))


def test_transient_faults_retry_and_every_attempt_is_kept(tmp_path: Path) -> None:
    with Keeper.open(flaky_keep(tmp_path, failures=2)) as keeper:
        job = keeper.run_many([circuit_text(0.1)], backend="flaky", retry=FAST)[0].job
        assert job.state == "done"
        attempts = job.attempts
        assert [a.error_class for a in attempts] == ["TransientBackendError"] * 2
        assert "simulated transient fault 1 of 2" in attempts[0].message
        assert len(manifest(job)["predicate"]["attempts"]) == 2


def test_a_delay_the_backend_asks_for_wins(tmp_path: Path) -> None:
    with Keeper.open(flaky_keep(tmp_path, failures=1, retry_after=0.4)) as keeper:
        job = keeper.run_many([circuit_text(0.2)], backend="flaky", retry=FAST)[0].job
        [attempt] = job.attempts
        assert attempt.retry_at is not None and attempt.retry_at - attempt.at >= 0.4 - 1e-3
        assert job.state == "done"


def test_permanent_fault_fails_at_once_with_the_reason(tmp_path: Path) -> None:
    keep = flaky_keep(tmp_path, permanent_message="device rejected the job (400): bad register")
    with Keeper.open(keep) as keeper:
        job = keeper.run_many([circuit_text(0.3)], backend="flaky", retry=FAST)[0].job
        assert job.state == "failed"
        assert job.record.error == "device rejected the job (400): bad register"
        assert len(job.attempts) == 1 and job.log_entry is None and job.result is None


def test_out_of_attempts_fails_with_the_whole_history(tmp_path: Path) -> None:
    with Keeper.open(flaky_keep(tmp_path, failures=9, max_attempts=3)) as keeper:
        job = keeper.run_many([circuit_text(0.4)], backend="flaky", retry=FAST)[0].job
        assert job.state == "failed"
        assert [a.number for a in job.attempts] == [1, 2, 3]
        assert job.record.attempts == 3
