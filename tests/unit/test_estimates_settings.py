"""Grouping terms into measurement settings, the settings' circuits, and shot allocation
(issue 15, items 2 and 3)."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from jobkeeper.circuit import Circuit, parse_qasm
from jobkeeper.circuit.ir import MEASURE
from jobkeeper.estimates import group_terms, observable_from, parse_observable, plan_settings
from jobkeeper.estimates.settings import BASIS_CHANGE
from jobkeeper.exceptions import CircuitError, ObservableError
from jobkeeper.stats.allocation import allocate_shots
from jobkeeper.stats.inputs import StatsInputError

# Pauli and gate matrices: Nielsen & Chuang §2.1.3 and §4.2 (textbook).
PAULI = {
    "I": np.eye(2),
    "X": np.array([[0, 1], [1, 0]], dtype=complex),
    "Y": np.array([[0, -1j], [1j, 0]]),
    "Z": np.diag([1.0, -1.0]).astype(complex),
}
GATE = {"h": np.array([[1, 1], [1, -1]]) / math.sqrt(2), "sdg": np.diag([1, -1j])}


def bell(extra: str = "measure q -> c;") -> Circuit:
    return parse_qasm(
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[3];\ncreg c[3];\n'
        f"h q[0];\ncx q[0],q[1];\n{extra}\n",
        filename="bell.qasm",
    )


def random_observable(rng: np.random.Generator, terms: int, qubits: int) -> dict[str, float]:
    out: dict[str, float] = {}
    for _ in range(terms):
        chosen = rng.choice(qubits, size=int(rng.integers(1, qubits + 1)), replace=False)
        label = " ".join(f"{'XYZ'[rng.integers(3)]}{q}" for q in chosen)
        out[label] = float(rng.normal())
    return out


@pytest.mark.parametrize("seed", range(5))
def test_every_group_commutes_qubit_by_qubit(seed: int) -> None:
    rng = np.random.default_rng(seed)
    observable = observable_from(random_observable(rng, 60, 6))
    groups = group_terms(observable.terms)
    assert sorted(i for g in groups for i in g) == list(range(len(observable.terms)))
    for group in groups:
        for a, b in itertools.combinations(group, 2):
            fa, fb = dict(observable.terms[a].factors), dict(observable.terms[b].factors)
            for q in range(6):
                # Textbook: 2×2 Pauli matrices commute iff equal or one is I.
                pa, pb = PAULI[fa.get(q, "I")], PAULI[fb.get(q, "I")]
                assert np.allclose(pa @ pb, pb @ pa)
    # Sorted insertion: the largest |coefficient| opens the first group.
    biggest = max(range(len(observable.terms)), key=lambda i: abs(observable.terms[i].coefficient))
    assert biggest in groups[0]


def test_sorted_insertion_by_hand() -> None:
    # Worked by hand from the rule (Crawford et al., Quantum 5, 385 (2021)): in order of
    # |c|: Z0 Z1 (opens A), X0 (clashes with A on qubit 0: opens B), Z1 (joins A),
    # X0 X1 (clashes with A; with B on qubit 1 it is free: joins B), Y2 (joins A).
    observable = observable_from({"Z0 Z1": 0.9, "X0": -0.8, "Z1": 0.5, "X0 X1": 0.4, "Y2": 0.1})
    labels = [t.label for t in observable.terms]
    groups = [sorted(labels[i] for i in g) for g in group_terms(observable.terms)]
    assert groups == [["Y2", "Z0 Z1", "Z1"], ["X0", "X0 X1"]]
    assert len(group_terms(observable.terms, "none")) == 5


@pytest.mark.parametrize("letter", ["X", "Y", "Z"])
def test_basis_change_maps_z_onto_the_letter(letter: str) -> None:
    # Measuring Z after U measures U† Z U (textbook): it must be the letter's matrix.
    u = np.eye(2, dtype=complex)
    for name in BASIS_CHANGE[letter]:  # type: ignore[index]
        u = GATE[name] @ u
    assert np.allclose(u.conj().T @ PAULI["Z"] @ u, PAULI[letter])


def test_settings_circuits_drop_final_measurements_and_measure_one_register() -> None:
    observable = parse_observable("1 X0 X1\n0.5 Z0 Z1\n0.25 Y2\n-2\n")
    plan = plan_settings(bell(), observable, shots=1000)
    assert plan.notes and "3 final measurements were dropped" in plan.notes[0]
    assert [s.label for s in plan.settings] == ["X0 X1 Y2", "Z0 Z1"]
    assert sum(s.shots or 0 for s in plan.settings) == 1000
    first = plan.settings[0].circuit
    assert len(first.cregs) == 1 and first.num_clbits == 3
    tail = [(op.name, op.qubits, op.clbits) for op in first.operations[2:]]
    assert tail == [
        ("h", (0,), ()), ("h", (1,), ()), ("sdg", (2,), ()), ("h", (2,), ()),
        (MEASURE, (0,), (0,)), (MEASURE, (1,), (1,)), (MEASURE, (2,), (2,)),
    ]  # fmt: skip
    assert plan_settings(bell(""), observable).notes == ()


def test_mid_circuit_measurements_and_conditions_are_refused() -> None:
    with pytest.raises(CircuitError, match="qubit 0 is measured mid-way"):
        plan_settings(bell("measure q[0] -> c[0];\nx q[0];"), observable_from({"Z0": 1.0}))
    with pytest.raises(CircuitError, match="conditioned"):
        plan_settings(bell("if(c==1) x q[2];"), observable_from({"Z0": 1.0}))
    # Another qubit may still be worked on after a final measurement.
    plan_settings(bell("measure q[0] -> c[0];\nx q[2];"), observable_from({"Z0": 1.0}))
    with pytest.raises(ObservableError, match="qubit 3 is past"):
        plan_settings(bell(), observable_from({"Z3": 1.0}))


def test_allocation_is_proportional_floored_and_sums_to_the_budget() -> None:
    # 1000 − 3·30 = 910 shared 2 : 1 : 1 → 455, 227.5, 227.5; the half shot goes to the
    # lower index (largest remainder, ties to the lower index).
    assert allocate_shots([2.0, 1.0, 1.0], 1000) == [485, 258, 257]
    assert allocate_shots([1.0, 0.0], 100, floor=10) == [90, 10]
    assert allocate_shots([0.0, 0.0], 11, floor=5) == [6, 5]
    rng = np.random.default_rng(3)
    for _ in range(50):
        weights = list(rng.exponential(size=int(rng.integers(1, 30))))
        budget = int(rng.integers(30 * len(weights), 100_000))
        shares = allocate_shots(weights, budget)
        assert sum(shares) == budget and min(shares) >= 30
        rest = budget - 30 * len(weights)
        for w, s in zip(weights, shares, strict=True):
            assert abs((s - 30) - rest * w / sum(weights)) < 1 + 1e-9
    with pytest.raises(StatsInputError, match="at least 90"):
        allocate_shots([1.0, 1.0, 1.0], 89)


def test_grouping_past_64_qubits() -> None:
    # Masks wider than a machine word take the arbitrary-precision route; same rule.
    observable = observable_from({"Z0 Z70": 0.9, "X70": -0.8, "Z70": 0.5, "X0 Y99": 0.4})
    labels = [t.label for t in observable.terms]
    groups = [sorted(labels[i] for i in g) for g in group_terms(observable.terms)]
    assert groups == [["Z0 Z70", "Z70"], ["X0 Y99", "X70"]]
