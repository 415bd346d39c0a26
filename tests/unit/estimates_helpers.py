"""Helpers for the estimate tests: an independent ⟨ψ|H|ψ⟩ by Kronecker products, random
circuits and observables, and running a plan's settings on a simulator. No tests here."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from jobkeeper.backend import LocalBackend, Task
from jobkeeper.circuit.ir import Circuit, Operation, Register
from jobkeeper.estimates import MeasurementPlan, Observable

# Pauli matrices: Nielsen & Chuang §2.1.3 (textbook).
PAULI = {
    "I": np.eye(2, dtype=complex),
    "X": np.array([[0, 1], [1, 0]], dtype=complex),
    "Y": np.array([[0, -1j], [1j, 0]], dtype=complex),
    "Z": np.array([[1, 0], [0, -1]], dtype=complex),
}


def pauli_matrix(factors: Mapping[int, str], n: int) -> np.ndarray:
    """⊗ of one Pauli per qubit, qubit n−1 leftmost (amplitude index bit q is qubit q)."""
    out = np.eye(1, dtype=complex)
    for q in reversed(range(n)):
        out = np.kron(out, PAULI[factors.get(q, "I")])
    return out


def hamiltonian(observable: Observable, n: int) -> np.ndarray:
    h = observable.identity * np.eye(2**n, dtype=complex)
    for term in observable.terms:
        h = h + term.coefficient * pauli_matrix(dict(term.factors), n)
    return h


def expectation(observable: Observable, state: np.ndarray) -> float:
    n = int(np.log2(state.size))
    return float(np.vdot(state, hamiltonian(observable, n) @ state).real)


def random_circuit(rng: np.random.Generator, n: int, layers: int = 3) -> Circuit:
    """Layers of u3 on every qubit with random angles and cx on random pairs, then a
    measurement of every qubit (which the estimate drops)."""
    ops: list[Operation] = []
    for _ in range(layers):
        ops.extend(Operation("u3", (q,), tuple(rng.uniform(-np.pi, np.pi, 3))) for q in range(n))
        order = rng.permutation(n)
        ops.extend(
            Operation("cx", (int(a), int(b))) for a, b in zip(order[::2], order[1::2], strict=False)
        )
    ops.extend(Operation("measure", (q,), clbits=(q,)) for q in range(n))
    return Circuit(
        num_qubits=n,
        num_clbits=n,
        qregs=(Register("q", n, 0),),
        cregs=(Register("c", n, 0),),
        operations=tuple(ops),
    )


def random_terms(rng: np.random.Generator, count: int, n: int) -> dict[str, float]:
    out: dict[str, float] = {"": float(rng.normal())}
    for _ in range(count):
        chosen = rng.choice(n, size=int(rng.integers(1, min(n, 4) + 1)), replace=False)
        out[" ".join(f"{'XYZ'[rng.integers(3)]}{q}" for q in chosen)] = float(rng.normal())
    return out


def without_measurements(circuit: Circuit) -> Circuit:
    ops = tuple(op for op in circuit.operations if op.name != "measure")
    return Circuit(circuit.num_qubits, 0, circuit.qregs, (), ops)


def exact_outcomes(plan: MeasurementPlan, backend: LocalBackend) -> dict[int, dict[str, float]]:
    out = {}
    for setting in plan.settings:
        result = backend.execute(Task(setting.circuit, 0, exact=True))
        assert result.probabilities is not None
        out[setting.index] = dict(result.probabilities)
    return out


def sample(
    rng: np.random.Generator, distribution: Mapping[str, float], shots: int, reps: int
) -> list[dict[str, int]]:
    """``reps`` multinomial samples of ``shots`` from an exact distribution, at once."""
    keys = sorted(distribution)
    p = np.array([distribution[k] for k in keys])
    drawn = rng.multinomial(shots, p / p.sum(), size=reps)
    return [{k: int(v) for k, v in zip(keys, row, strict=True) if v} for row in drawn]
