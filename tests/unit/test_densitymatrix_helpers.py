"""Helpers for the density-matrix tests: a brute-force noisy reference simulator written
from the textbook definitions with full 2^n × 2^n matrices (no code shared with the
backend's kernels, channels or record tracking), and random circuits. No tests here.

The reference follows the channel definitions of Nielsen & Chuang chapter 8: a channel
is ρ ↦ Σ K ρ K†; depolarizing ρ ↦ (1 − p)ρ + p/(4^k − 1) Σ_{P≠I} PρP (§8.3.4, with p
the total probability of a non-identity Pauli); amplitude damping with Kraus operators
[[1, 0], [0, √(1−γ)]] and [[0, √γ], [0, 0]] (§8.3.5); phase flip (§8.3.3). Measurement
is a projection per classical record; the readout error flips the recorded bit.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable

import numpy as np

from jobkeeper.circuit.ir import Circuit, Operation
from jobkeeper.circuit.stdgates import expand_standard
from tests.unit.test_statevector_helpers import (
    PAULI_X,
    PAULI_Y,
    PAULI_Z,
    Add,
    circuit,
    cregs,
    evolve,
    ground_records,
    measure,
    on_register,
    op,
    projector,
    spec_u,
)

IDENTITY = np.eye(2, dtype=complex)
PAULIS = (IDENTITY, PAULI_X, PAULI_Y, PAULI_Z)
CX = np.array([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]], dtype=complex)


def _positions(n: int, qubits: Iterable[int]) -> tuple[int, ...]:
    # on_register counts position 0 as the most significant bit; qubit q is bit q.
    return tuple(n - 1 - q for q in qubits)


def pauli_products(k: int) -> list[np.ndarray]:
    out = [np.ones((1, 1), dtype=complex)]
    for _ in range(k):
        out = [np.kron(a, b) for a in out for b in PAULIS]
    return out


def reference(
    circ: Circuit,
    gate: Callable[[str, tuple[float, ...]], np.ndarray],
    *,
    p1: float = 0.0,
    p2: float = 0.0,
    readout: float | list[float] = 0.0,
    t1: float | None = None,
    t2: float | None = None,
    time1: float = 0.0,
    time2: float = 0.0,
) -> dict[int, np.ndarray]:
    """Unnormalised ρ per classical record after every operation, final measurements
    included (as projections with readout error). ``gate(name, params)`` gives a gate's
    matrix. Gates on ≥ 3 qubits run as their published definition when gates are
    noisy, as the backend documents."""
    n = circ.num_qubits
    dim = 1 << n
    records = ground_records(n)
    noisy = p1 > 0 or p2 > 0 or t1 is not None or t2 is not None

    def error(q: int) -> float:
        return readout[q] if isinstance(readout, list) else readout

    def kraus(rho: np.ndarray, ops: list[np.ndarray], qubits: tuple[int, ...]) -> np.ndarray:
        full = [on_register(k, _positions(n, qubits), n) for k in ops]
        return sum(k @ rho @ k.conj().T for k in full)

    def noisy_gate(rho: np.ndarray, u: np.ndarray, qubits: tuple[int, ...]) -> np.ndarray:
        rho = kraus(rho, [u], qubits)
        k = len(qubits)
        p = p1 if k == 1 else p2
        paulis = pauli_products(k)
        weights = [1 - p] + [p / (len(paulis) - 1)] * (len(paulis) - 1)
        rho = kraus(rho, [math.sqrt(w) * m for w, m in zip(weights, paulis, strict=True)], qubits)
        duration = time1 if k == 1 else time2
        for q in qubits:
            if t1 is not None:
                gamma = 1 - math.exp(-duration / t1)
                ad = [np.diag([1, math.sqrt(1 - gamma)]), np.array([[0, math.sqrt(gamma)], [0, 0]])]
                rho = kraus(rho, [np.asarray(a, dtype=complex) for a in ad], (q,))
            if t2 is not None:
                rate = 1 / t2 - (0 if t1 is None else 1 / (2 * t1))
                flip = (1 - math.exp(-duration * rate)) / 2
                rho = kraus(rho, [math.sqrt(1 - flip) * IDENTITY, math.sqrt(flip) * PAULI_Z], (q,))
        return rho

    def step(operation: Operation, record: int, rho: np.ndarray, add: Add) -> None:
        if operation.name == "measure":
            (q,), (c,) = operation.qubits, operation.clbits
            e = error(q)
            for value in (0, 1):
                proj = projector(q, value, dim)
                collapsed = proj @ rho @ proj
                for reading, weight in ((value, 1 - e), (1 - value, e)):
                    if weight:
                        bits = record | (1 << c) if reading else record & ~(1 << c)
                        add(bits, weight * collapsed)
        elif operation.name == "reset":
            (q,) = operation.qubits
            flip = on_register(PAULI_X, _positions(n, (q,)), n)
            p0, p1_ = projector(q, 0, dim), projector(q, 1, dim)
            # measure, then X when the (possibly misread) outcome is 1.
            e = error(q)
            right = p0 @ rho @ p0 + flip @ p1_ @ rho @ p1_ @ flip
            add(record, (1 - e) * right + e * flip @ right @ flip)
        elif len(operation.qubits) >= 3 and noisy:
            for name, pos, values in expand_standard(operation.name, operation.params):
                qubits = tuple(operation.qubits[i] for i in pos)
                rho = noisy_gate(rho, CX if name == "CX" else spec_u(*values), qubits)
            add(record, rho)
        elif noisy:
            add(
                record,
                noisy_gate(rho, gate(operation.name, operation.params), operation.qubits),
            )
        else:
            u = gate(operation.name, operation.params)
            add(record, kraus(rho, [u], operation.qubits))

    return evolve(circ, records, step)


def distribution(circ: Circuit, records: dict[int, np.ndarray]) -> dict[str, float]:
    """Count keys (jobkeeper's: registers in declaration order joined by "|", each its
    value in binary, highest index leftmost) → P."""
    out: dict[str, float] = {}
    for record, rho in records.items():
        parts = []
        for reg in circ.cregs:
            parts.append(
                "".join(str((record >> (reg.offset + i)) & 1) for i in reversed(range(reg.size)))
            )
        key = "|".join(parts)
        out[key] = out.get(key, 0.0) + float(np.trace(rho).real)
    return {k: v for k, v in out.items() if v > 1e-15}


def random_circuit(
    rng: np.random.Generator, n: int = 3, length: int = 14, wide: bool = True
) -> Circuit:
    """A random circuit with gates (some on three qubits), mid-circuit measurements,
    resets and ``if`` (on gates, measurements and resets), ending with a measurement of
    every qubit."""
    regs = cregs(2, n)
    kinds = ["u3", "cx", "h", "rzz", "measure", "reset", "if", "id", "if-measure", "if-reset"] + (
        ["ccx", "cswap"] if wide else []
    )
    ops: list[Operation] = []
    for _ in range(length):
        kind = str(rng.choice(kinds))
        q = int(rng.integers(n))
        a, b, c = (int(x) for x in rng.permutation(n)[:3])
        if kind == "u3":
            ops.append(op("u3", q, params=rng.uniform(-np.pi, np.pi, 3)))
        elif kind in ("h", "id"):
            ops.append(op(kind, q))
        elif kind == "cx":
            ops.append(op("cx", a, b))
        elif kind == "rzz":
            ops.append(op("rzz", a, b, params=[float(rng.uniform(-np.pi, np.pi))]))
        elif kind in ("ccx", "cswap"):
            ops.append(op(kind, a, b, c))
        elif kind == "measure":
            ops.append(measure(q, int(rng.integers(2))))
        elif kind == "reset":
            ops.append(op("reset", q))
        elif kind == "if-measure":
            target = int(rng.integers(2))
            ops.append(op("measure", q, clbits=[target], cond=(regs[0], int(rng.integers(4)))))
        elif kind == "if-reset":
            ops.append(op("reset", q, cond=(regs[0], int(rng.integers(4)))))
        else:
            gate = str(rng.choice(["x", "h", "z"]))
            ops.append(op(gate, q, cond=(regs[0], int(rng.integers(4)))))
    ops += [measure(q, 2 + q) for q in range(n)]
    return circuit(n, ops, [2, n])
