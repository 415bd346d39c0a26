"""Sampled estimates: calibration of the error bars, and readout mitigation on a noisy
simulator (issue 15, acceptance: calibration, seeded).

Tolerances: 200 repetitions of a 95% interval cover the true value 190 times on average
with a binomial standard deviation of √(200·0.95·0.05) ≈ 3.1 (textbook binomial), so a
calibrated interval covers between 0.95 − 3σ and 0.95 + 3σ of the time (σ ≈ 0.0154).
The spread of 200 estimates is itself known to about 1/√(2·199) ≈ 5% (the standard error
of a normal sample's standard deviation; textbook), so 15% is a 3σ tolerance.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from jobkeeper.backend import LocalBackend, Task
from jobkeeper.backends.sim.densitymatrix import DensityMatrixBackend, NoiseModel
from jobkeeper.backends.sim.statevector import StatevectorBackend
from jobkeeper.circuit.ir import Circuit, Operation, Register
from jobkeeper.estimates import MeasurementPlan, observable_from, plan_settings
from jobkeeper.estimates.document import EstimateDocument, aggregate
from jobkeeper.estimates.settings import calibration_circuits
from jobkeeper.stats.readout import calibrate_readout
from tests.unit.estimates_helpers import (
    exact_outcomes,
    expectation,
    random_circuit,
    sample,
    without_measurements,
)

REPS = 200
SIGMA = math.sqrt(0.95 * 0.05 / REPS)


def exact(circuit: Circuit, backend: LocalBackend) -> dict[str, float]:
    result = backend.execute(Task(circuit, 0, exact=True))
    assert result.probabilities is not None
    return dict(result.probabilities)


def repetitions(
    rng: np.random.Generator,
    plan: MeasurementPlan,
    distributions: Mapping[int, Mapping[str, float]],
) -> list[dict[int, dict[str, int]]]:
    drawn = {
        s.index: sample(rng, distributions[s.index], s.shots or 0, REPS) for s in plan.settings
    }
    return [{index: runs[r] for index, runs in drawn.items()} for r in range(REPS)]


def coverage(documents: list[EstimateDocument], truth: float) -> tuple[float, float, float]:
    """(fraction covering the truth, std of the values, mean reported standard error)."""
    covered = sum(d.interval[0] <= truth <= d.interval[1] for d in documents) / len(documents)
    values = np.array([d.value for d in documents])
    errors = np.array([d.standard_error for d in documents])
    return covered, float(values.std(ddof=1)), float(errors.mean())


def test_intervals_cover_at_the_nominal_rate_and_errors_match_the_spread() -> None:
    rng = np.random.default_rng(385)
    circuit = random_circuit(rng, 3)
    observable = observable_from(
        {"": 0.3, "Z0 Z1": 0.8, "X0": -0.6, "X0 X2": 0.5, "Y1 Y2": 0.4, "Z2": 0.3, "X1": 0.2}
    )
    truth = expectation(observable, StatevectorBackend().final_state(without_measurements(circuit)))
    plan = plan_settings(circuit, observable, shots=2000)
    runs = repetitions(rng, plan, exact_outcomes(plan, StatevectorBackend()))
    covered, spread, reported = coverage([aggregate(plan, run) for run in runs], truth)
    print(f"coverage {covered:.3f}, spread {spread:.5f}, mean standard error {reported:.5f}")
    assert abs(covered - 0.95) <= 3 * SIGMA
    assert abs(spread / reported - 1) <= 0.15


def test_readout_mitigation_restores_coverage_that_readout_error_destroys() -> None:
    # Readout error only, 0.03 on each of 4 qubits (density-matrix backend): the
    # unmitigated estimate is biased by the flips, the mitigated one is not.
    rng = np.random.default_rng(42605)
    # A four-qubit GHZ state, slightly rotated: large expectations of long Z and X
    # products, which readout flips shrink most.
    ops = [Operation("h", (0,)), *(Operation("cx", (q, q + 1)) for q in range(3))]
    ops += [Operation("ry", (1,), (0.2,)), Operation("rz", (2,), (0.3,))]
    circuit = Circuit(4, 0, (Register("q", 4, 0),), (), tuple(ops))
    observable = observable_from(
        {"Z0 Z1 Z2 Z3": 0.7, "Z0 Z1": -0.5, "X0 X1 X2 X3": 0.6, "Y1 Y2": 0.4, "Z3": 0.3}
    )
    truth = expectation(observable, StatevectorBackend().final_state(without_measurements(circuit)))
    noisy = DensityMatrixBackend(noise=NoiseModel(readout_error=0.03))
    plan = plan_settings(circuit, observable, shots=8000)
    runs = repetitions(rng, plan, exact_outcomes(plan, noisy))
    qubits, zeros_circuit, ones_circuit = calibration_circuits(plan)
    zeros = sample(rng, exact(zeros_circuit, noisy), 4000, REPS)
    ones = sample(rng, exact(ones_circuit, noisy), 4000, REPS)
    mitigated = [
        aggregate(plan, run, calibration=calibrate_readout(qubits, z, o))
        for run, z, o in zip(runs, zeros, ones, strict=True)
    ]
    plain = [aggregate(plan, run) for run in runs]
    covered, spread, reported = coverage(mitigated, truth)
    covered_plain, _, _ = coverage(plain, truth)
    print(
        f"mitigated coverage {covered:.3f} (spread {spread:.5f}, standard error "
        f"{reported:.5f}); unmitigated coverage {covered_plain:.3f}"
    )
    assert abs(covered - 0.95) <= 3 * SIGMA
    assert abs(spread / reported - 1) <= 0.15
    assert covered_plain < 0.5
