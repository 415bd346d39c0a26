"""Mid-circuit measurement, reset and ``if`` in the state-vector backend.

References: teleportation (Nielsen & Chuang section 1.3.7: the teleported qubit has the
input's measurement statistics); a brute-force density-matrix simulation written in the
helpers (every measurement a projection, reset = P0ρP0 + X P1ρP1 X; common practice)
for random small circuits; scipy.stats.chisquare for counts.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from jobkeeper.backend import Task
from jobkeeper.backends.sim.gates import gate_matrix
from jobkeeper.backends.sim.statevector import StatevectorBackend
from jobkeeper.circuit.ir import Operation
from jobkeeper.exceptions import PermanentBackendError
from tests.unit.test_statevector_helpers import (
    circuit,
    cregs,
    density_reference,
    exact,
    measure,
    op,
    tvd,
)

TOL = 1e-9


def teleportation(theta: float, phi: float) -> list[Operation]:
    c0, c1, _ = cregs(1, 1, 1)
    return [
        op("u3", 0, params=[theta, phi, 0.0]),  # the state to send
        op("h", 1),
        op("cx", 1, 2),
        op("cx", 0, 1),
        op("h", 0),
        measure(0, 0),
        measure(1, 1),
        op("x", 2, cond=(c1, 1)),
        op("z", 2, cond=(c0, 1)),
        measure(2, 2),
    ]


@pytest.mark.parametrize(("theta", "phi"), [(0.0, 0.0), (1.0, 0.5), (2.2, -1.0), (np.pi, 0.3)])
def test_teleportation_delivers_the_input_statistics(theta: float, phi: float) -> None:
    # N&C section 1.3.7: after the corrections, qubit 2 is in the input state, so it
    # reads 1 with probability sin²(θ/2); the two sent bits are uniform.
    circ = circuit(3, teleportation(theta, phi), [1, 1, 1])
    probs = exact(circ)
    p1 = sum(p for key, p in probs.items() if key[-1] == "1")  # c2: the last register
    assert p1 == pytest.approx(np.sin(theta / 2) ** 2, abs=1e-12)
    for sent in ("0|0", "0|1", "1|0", "1|1"):  # c0|c1, the first two registers
        total = sum(p for key, p in probs.items() if key.startswith(sent))
        assert total == pytest.approx(0.25, abs=1e-12)
    assert tvd(probs, density_reference(circ, gate_matrix)) < TOL


def _random_branching_circuit(rng: np.random.Generator, n: int = 3) -> list[Operation]:
    regs = cregs(2, 1)
    ops: list[Operation] = []
    for _ in range(int(rng.integers(4, 12))):
        kind = rng.choice(["u3", "cx", "measure", "reset", "if", "h"])
        q = int(rng.integers(n))
        if kind == "u3":
            ops.append(op("u3", q, params=rng.uniform(-np.pi, np.pi, 3)))
        elif kind == "h":
            ops.append(op("h", q))
        elif kind == "cx":
            a, b = (int(x) for x in rng.choice(n, 2, replace=False))
            ops.append(op("cx", a, b))
        elif kind == "measure":
            ops.append(measure(q, int(rng.integers(3))))
        elif kind == "reset":
            ops.append(op("reset", q))
        else:
            reg = regs[int(rng.integers(2))]
            value = int(rng.integers(1 << reg.size))
            name = str(rng.choice(["x", "h", "ry"]))
            params = [float(rng.uniform(0, 3))] if name == "ry" else []
            ops.append(op(name, q, params=params, cond=(reg, value)))
    ops += [measure(q, q) for q in range(n)]
    return ops


@pytest.mark.parametrize("seed", range(30))
def test_random_branching_circuits_match_a_density_matrix(seed: int) -> None:
    # Brute-force density-matrix reference (helpers), exact within 1e-9 TVD.
    rng = np.random.default_rng(seed)
    circ = circuit(3, _random_branching_circuit(rng), [2, 1])
    assert tvd(exact(circ), density_reference(circ, gate_matrix)) < TOL


def test_reset_and_conditional_on_a_measured_bit() -> None:
    # Hand-worked: ry(θ) then measure → 1 with p = sin²(θ/2); reset returns |0⟩; the if
    # re-excites only when the bit read 1, so qubit 0 ends reading what bit 0 read.
    theta = 1.3
    (c,) = cregs(2)[:1]
    ops = [
        op("ry", 0, params=[theta]),
        measure(0, 0),
        op("reset", 0),
        op("x", 0, cond=(c, 1)),
        measure(0, 1),
    ]
    p = np.sin(theta / 2) ** 2
    assert tvd(exact(circuit(1, ops, [2])), {"00": 1 - p, "11": p}) < TOL


def test_branching_counts_fit_the_exact_distribution() -> None:
    # scipy.stats.chisquare, α = 1e-3, fixed seed; shots split over branches by one
    # seeded multinomial, never a loop over shots.
    circ = circuit(3, teleportation(1.2, 0.4), [1, 1, 1])
    result = StatevectorBackend().execute(Task(circ, 40_000, seed=5, exact=True))
    assert result.counts is not None and result.probabilities is not None
    assert result.metadata["branches"] == 4
    keys = sorted(result.probabilities)
    observed = np.array([result.counts.get(k, 0) for k in keys])
    expected = np.array([result.probabilities[k] for k in keys]) * 40_000
    assert observed.sum() == 40_000 and set(result.counts) <= set(keys)
    assert stats.chisquare(observed, expected * observed.sum() / expected.sum()).pvalue > 1e-3
    again = StatevectorBackend().execute(Task(circ, 40_000, seed=5))
    assert again.counts == result.counts


def test_too_many_branches_is_refused_clearly() -> None:
    ops = []
    for _ in range(6):
        ops += [op("h", 0), measure(0, 0)]
    circ = circuit(1, [*ops, op("h", 0)], [1])
    backend = StatevectorBackend(config={"max_branches": 16})
    with pytest.raises(PermanentBackendError, match="more than 16 outcome branches"):
        backend.execute(Task(circ, 10, seed=1))
    assert StatevectorBackend(config={"max_branches": 64}).execute(Task(circ, 10, seed=1))


def test_certain_outcomes_do_not_branch() -> None:
    ops = [op("x", 0), measure(0, 0), op("x", 1, cond=(cregs(1)[0], 1)), measure(1, 1)]
    result = StatevectorBackend().execute(Task(circuit(2, ops, [1, 1]), 10, seed=1))
    assert result.counts == {"1|1": 10} and result.metadata["branches"] == 1


def test_the_random_circuits_do_exercise_branching() -> None:
    # Guards the test above against a generator that stopped producing branches.
    branching = 0
    for seed in range(30):
        circ = circuit(3, _random_branching_circuit(np.random.default_rng(seed)), [2, 1])
        result = StatevectorBackend().execute(Task(circ, 0, seed=1))
        branching += result.metadata["branches"] > 1
    assert branching >= 10
