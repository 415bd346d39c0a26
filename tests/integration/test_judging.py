"""Reruns from the manifest alone and archived comparisons (jobkeeper rerun / compare).

Outside references: the Bell pair's ideal distribution (Nielsen & Chuang §1.3.6); a
deterministic backend given the same seed must reproduce its counts exactly (the
definition of a seeded pseudo-random sampler, common practice); the statistics
themselves are checked against scipy in tests/unit/test_stats*.py."""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest

from jobkeeper import BudgetExceeded, Keeper
from jobkeeper.cli import main

REPO = Path(__file__).resolve().parents[2]
BELL = REPO / "examples" / "circuits" / "bell.qasm"


@pytest.fixture
def keeper(tmp_path: Path):
    with Keeper.open(tmp_path / "keep") as k:
        yield k


def test_rerun_on_the_same_deterministic_backend_is_identical(keeper: Keeper) -> None:
    job = keeper.run(BELL, shots=2000, seed=11)
    judgement = keeper.rerun(job)
    assert judgement.record.verdict == "identical"
    again = keeper.job(judgement.rerun_job or "")
    assert again.counts == job.counts and again.id != job.id
    assert again.spec.rerun_of == job.id
    assert keeper.verify().ok


def test_rerun_runs_from_the_manifest_not_the_users_file(keeper: Keeper, tmp_path: Path) -> None:
    source = tmp_path / "mine.qasm"
    source.write_text(BELL.read_text())
    job = keeper.run(source, shots=500, seed=3)
    source.write_text("this file is gone\n")
    assert keeper.rerun(job).record.verdict == "identical"


def test_rerun_with_another_seed_is_consistent(keeper: Keeper) -> None:
    job = keeper.run(BELL, shots=4000, seed=1)
    judgement = keeper.rerun(job, seed=2)
    assert judgement.record.verdict == "consistent"
    assert keeper.job(judgement.rerun_job or "").counts != job.counts


def test_compare_pair_and_ideal_are_archived_signed_and_shown(keeper: Keeper, capsys) -> None:
    a = keeper.run(BELL, shots=3000, seed=5)
    b = keeper.run(BELL, shots=3000, seed=6)
    assert keeper.compare(a, b).record.verdict == "consistent"
    ideal = keeper.compare(a, ideal=True)
    assert ideal.record.verdict == "consistent"
    assert ideal.comparison.p_value is not None and ideal.comparison.p_value > 0.01
    assert len(keeper.store.comparisons(a.id)) == 2
    report = keeper.verify()
    assert report.ok and report.checked == 4  # two jobs and two comparisons in the log
    assert main(["show", a.id, "--keep", str(keeper.path), "--json"]) == 0
    shown = json.loads(capsys.readouterr().out)
    assert {c["kind"] for c in shown["comparisons"]} == {"pair", "ideal"}


def test_a_changed_comparison_report_is_caught(keeper: Keeper) -> None:
    a = keeper.run(BELL, shots=1000, seed=5)
    b = keeper.run(BELL, shots=1000, seed=6)
    judgement = keeper.compare(a, b)
    conn = sqlite3.connect(keeper.path / "archive.db", isolation_level=None)
    report = judgement.record.report.replace('"consistent"', '"different"')
    conn.execute("UPDATE comparisons SET report = ? WHERE id = ?", (report, judgement.record.id))
    conn.close()
    assert any("comparison.json digest mismatch" in p for p in keeper.verify().problems)


def test_compare_exits_1_on_different(keeper: Keeper, tmp_path: Path, capsys) -> None:
    a = keeper.run(BELL, shots=2000, seed=5)
    flipped = tmp_path / "flip.qasm"
    flipped.write_text(BELL.read_text().replace("cx q[0], q[1];", "x q[1];"))
    b = keeper.run(flipped, shots=2000, seed=5)  # outcomes 10 and 11: a different distribution
    code = main(["compare", a.id, b.id, "--keep", str(keeper.path), "--json"])
    assert code == 1 and json.loads(capsys.readouterr().out)["result"]["verdict"] == "different"


def test_budget_refuses_with_the_amount_left_and_queues_nothing(tmp_path: Path, capsys) -> None:
    keep = tmp_path / "keep"
    keep.mkdir()
    (keep / "config.toml").write_text(
        "[budget]\ntotal = 10.0\n[budget.labels]\npaper = 3.0\n\n"
        '[backends.paid]\nadapter = "recording"\n'
        f'ledger_dir = "{tmp_path / "ledger"}"\n'
    )
    # The recording double has no pricing; wrap it with one (invented prices).
    from jobkeeper import testing

    class Priced(testing.RecordingBackend):
        @property
        def info(self):  # type: ignore[override]
            from dataclasses import replace

            from jobkeeper.backend import Pricing

            return replace(super().info, pricing=Pricing(currency="credits", per_task=1.0,
                                                         per_shot=0.001))  # fmt: skip

    with Keeper.open(keep) as keeper:
        keeper._backends["paid"] = Priced("paid", tmp_path / "ledger")
        keeper.submit(BELL, backend="paid", shots=1000, labels={"paper"})  # costs 2.0
        with pytest.raises(BudgetExceeded) as refused:
            keeper.submit(BELL, backend="paid", shots=1000, seed=2, labels={"paper"})
        assert "1 left of 3" in str(refused.value) and "nothing was queued" in str(refused.value)
        assert len(keeper.jobs()) == 1
        over = keeper.submit(BELL, backend="paid", shots=1000, seed=2, labels={"paper"},
                             over_budget=True)  # fmt: skip
        assert over.state == "queued" and len(keeper.jobs()) == 2


def test_rerun_on_a_noisy_backend_with_another_seed_is_consistent(tmp_path: Path) -> None:
    keep = tmp_path / "keep"
    keep.mkdir()
    (keep / "config.toml").write_text(
        '[backends.noisy]\nadapter = "densitymatrix"\ndepolarizing_1q = 0.002\n'
        "depolarizing_2q = 0.02\nreadout_error = 0.03\n"
    )
    with Keeper.open(keep) as keeper:
        job = keeper.run(BELL, backend="noisy", shots=4000, seed=1)
        judgement = keeper.rerun(job, seed=2)
        assert judgement.record.verdict == "consistent"
        # Noise shows: some shots land on 01 and 10, which the ideal Bell pair never gives.
        assert set(job.counts) == {"00", "01", "10", "11"}
        assert keeper.compare(job, ideal=True).record.verdict == "different"


def test_the_python_api_refuses_what_the_command_line_refuses(keeper: Keeper) -> None:
    from jobkeeper import ConfigError

    job = keeper.run(BELL, shots=200, seed=1)
    with pytest.raises(ConfigError, match="alpha must be above 0"):
        keeper.compare(job, job, alpha=0.0)
    with pytest.raises(ConfigError, match="compare two jobs"):
        keeper.compare(job)
    with pytest.raises(ConfigError, match="shots must be a positive whole number, got -5"):
        keeper.check(BELL, shots=-5)
    with pytest.raises(ConfigError, match="seed must be a whole number"):
        keeper.rerun(job, seed=-1)
