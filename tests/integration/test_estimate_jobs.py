"""Each measurement setting of an estimate runs as an ordinary job in a real keep: its
counts come back from the archive (signed like any job's) and aggregate to an estimate
that agrees with the exact value (issue 15, item 2)."""

from __future__ import annotations

from pathlib import Path

from jobkeeper import Keeper
from jobkeeper.circuit import load_qasm
from jobkeeper.estimates import aggregate, parse_observable, plan_settings

BELL = Path(__file__).resolve().parents[2] / "examples" / "circuits" / "bell.qasm"


def test_settings_run_as_ordinary_jobs(tmp_path: Path) -> None:
    # The Bell state (|00⟩ + |11⟩)/√2: ⟨Z0 Z1⟩ = ⟨X0 X1⟩ = 1, ⟨Y0 Y1⟩ = −1, ⟨Z0⟩ = 0
    # (Nielsen & Chuang §1.3.6; textbook), so 0.5 + 0.8 + 0.3 + 0.2 = 1.8 for this
    # invented observable.
    observable = parse_observable("0.5\n0.8 Z0 Z1\n0.3 X0 X1\n-0.2 Y0 Y1\n0.4 Z0\n")
    plan = plan_settings(load_qasm(BELL), observable, shots=3000)
    with Keeper.open(tmp_path / "keep") as keeper:
        jobs = {s.index: keeper.run(s.circuit, shots=s.shots, seed=11) for s in plan.settings}
        assert all(job.state == "done" for job in jobs.values())
        document = aggregate(plan, {index: job.counts for index, job in jobs.items()})
        assert keeper.verify().ok
        # The same settings again are the same jobs: nothing runs twice.
        again = {s.index: keeper.run(s.circuit, shots=s.shots, seed=11) for s in plan.settings}
        assert {i: j.id for i, j in again.items()} == {i: j.id for i, j in jobs.items()}
    low, high = document.interval
    assert low <= 1.8 <= high
    # Z0 Z1, X0 X1 and Y0 Y1 are eigenvalues here: only Z0's shots vary.
    by_label = {t.label: t for t in document.terms}
    assert by_label["Z0 Z1"].expectation == 1.0 and by_label["Y0 Y1"].expectation == -1.0
    assert by_label["Z0"].standard_error > 0
