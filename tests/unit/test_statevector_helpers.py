"""Helpers for the state-vector tests: circuits built by hand in the IR (independent of
the parser), a brute-force density-matrix reference, and a distance between
distributions. No tests here."""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping
from functools import partial

import numpy as np
from scipy.linalg import expm

from jobkeeper.backend import Task
from jobkeeper.backends.sim.statevector import StatevectorBackend
from jobkeeper.circuit.ir import Circuit, Condition, Operation, Register

PAULI_X = np.array([[0, 1], [1, 0]], dtype=complex)
PAULI_Y = np.array([[0, -1j], [1j, 0]], dtype=complex)
PAULI_Z = np.array([[1, 0], [0, -1]], dtype=complex)


def op(
    name: str,
    *qubits: int,
    params: Iterable[float] = (),
    clbits: Iterable[int] = (),
    cond: tuple[Register, int] | None = None,
) -> Operation:
    condition = None
    if cond is not None:
        reg, value = cond
        condition = Condition(tuple(range(reg.offset, reg.offset + reg.size)), value)
    return Operation(name, tuple(qubits), tuple(params), tuple(clbits), condition)


def measure(qubit: int, clbit: int) -> Operation:
    return Operation("measure", (qubit,), (), (clbit,))


def cregs(*sizes: int) -> tuple[Register, ...]:
    """Classical registers c0, c1, ... of the given sizes, declared in that order."""
    regs, offset = [], 0
    for i, size in enumerate(sizes):
        regs.append(Register(f"c{i}", size, offset))
        offset += size
    return tuple(regs)


def circuit(
    num_qubits: int,
    ops: Iterable[Operation],
    creg_sizes: Iterable[int] = (),
    opaque: Iterable[str] = (),
) -> Circuit:
    regs = cregs(*creg_sizes)
    return Circuit(
        num_qubits=num_qubits,
        num_clbits=sum(r.size for r in regs),
        qregs=(Register("q", num_qubits, 0),),
        cregs=regs,
        operations=tuple(ops),
        opaque=frozenset(opaque),
    )


def exact(circ: Circuit, backend: StatevectorBackend | None = None) -> dict[str, float]:
    result = (backend or StatevectorBackend()).execute(Task(circ, shots=0, seed=1, exact=True))
    assert result.probabilities is not None
    return dict(result.probabilities)


def tvd(p: Mapping[str, float], q: Mapping[str, float]) -> float:
    """Total variation distance between two distributions given as dicts."""
    keys = set(p) | set(q)
    return 0.5 * sum(abs(p.get(k, 0.0) - q.get(k, 0.0)) for k in keys)


def spec_u(theta: float, phi: float, lam: float) -> np.ndarray:
    """U(θ,φ,λ) = Rz(φ)Ry(θ)Rz(λ), as the OpenQASM 2.0 specification defines it
    (arXiv:1707.03429, section 3), from the Pauli generators by scipy.linalg.expm."""
    return expm(-0.5j * phi * PAULI_Z) @ expm(-0.5j * theta * PAULI_Y) @ expm(-0.5j * lam * PAULI_Z)


def on_register(matrix: np.ndarray, positions: tuple[int, ...], width: int) -> np.ndarray:
    """A gate on ``positions`` (position 0 = most significant bit) of ``width`` qubits,
    as a full matrix built over basis states by index arithmetic (no code shared with
    the simulator)."""
    k = len(positions)
    dim = 1 << width
    cols = np.arange(dim)
    weights = 1 << (width - 1 - np.arange(width))
    bits = (cols[:, None] >> (width - 1 - np.arange(width))) & 1
    sub_in = sum(bits[:, p] << (k - 1 - i) for i, p in enumerate(positions))
    full = np.zeros((dim, dim), dtype=complex)
    for sub_out in range(1 << k):
        out = bits.copy()
        for i, p in enumerate(positions):
            out[:, p] = (sub_out >> (k - 1 - i)) & 1
        full[out @ weights, cols] += matrix[sub_out, sub_in]
    return full


def ground_records(n: int) -> dict[int, np.ndarray]:
    """One classical record (all bits 0) holding ρ = |0…0⟩⟨0…0| on ``n`` qubits."""
    rho0 = np.zeros((1 << n, 1 << n), dtype=complex)
    rho0[0, 0] = 1
    return {0: rho0}


def projector(qubit: int, value: int, dim: int) -> np.ndarray:
    """The projector onto bit ``qubit`` of the basis index being ``value``."""
    return np.diag([1.0 if ((i >> qubit) & 1) == value else 0.0 for i in range(dim)])


def add_density(into: dict[int, np.ndarray], record: int, rho: np.ndarray) -> None:
    """Add ρ to what classical record ``record`` holds (unnormalised mixtures add)."""
    into[record] = into[record] + rho if record in into else rho


def passes_by(operation: Operation, record: int) -> bool:
    """A barrier, or an operation whose condition the classical record does not meet,
    leaves that record's ρ as it is."""
    if operation.name == "barrier":
        return True
    cond = operation.condition
    if cond is None:
        return False
    return sum(((record >> c) & 1) << i for i, c in enumerate(cond.clbits)) != cond.value


#: Adds ρ to a classical record's share (see :func:`evolve`).
Add = Callable[[int, np.ndarray], None]


def evolve(
    circ: Circuit,
    records: dict[int, np.ndarray],
    step: Callable[[Operation, int, np.ndarray, Add], None],
) -> dict[int, np.ndarray]:
    """ρ per classical record after each operation of ``circ`` in turn:
    ``step(operation, record, rho, add)`` adds what one operation makes of one record's ρ
    (barriers and unmet conditions pass it by)."""
    for operation in circ.operations:
        updated: dict[int, np.ndarray] = {}
        add = partial(add_density, updated)
        for record, rho in records.items():
            if passes_by(operation, record):
                add(record, rho)
            else:
                step(operation, record, rho, add)
        records = updated
    return records


def density_reference(
    circ: Circuit, gate: Callable[[str, tuple[float, ...]], np.ndarray]
) -> dict[str, float]:
    """Exact outcome distribution by brute force: a density matrix per classical record,
    every measurement (final or not) a projection, reset = P0ρP0 + X P1ρP1 X. Qubit q
    is bit q of the basis index; ``gate(name, params)`` gives a gate's matrix (first
    listed qubit most significant)."""
    n = circ.num_qubits
    dim = 1 << n
    records = ground_records(n)

    def positions(qubits: tuple[int, ...]) -> tuple[int, ...]:
        return tuple(n - 1 - q for q in qubits)

    def step(operation: Operation, record: int, rho: np.ndarray, add: Add) -> None:
        if operation.name == "measure":
            (q,), (c,) = operation.qubits, operation.clbits
            for value in (0, 1):
                p = projector(q, value, dim)
                bit_set = record | (1 << c) if value else record & ~(1 << c)
                add(bit_set, p @ rho @ p)
        elif operation.name == "reset":
            (q,) = operation.qubits
            flip = on_register(PAULI_X, positions((q,)), n)
            p0, p1 = projector(q, 0, dim), projector(q, 1, dim)
            add(record, p0 @ rho @ p0 + flip @ p1 @ rho @ p1 @ flip)
        else:
            u = on_register(gate(operation.name, operation.params), positions(operation.qubits), n)
            add(record, u @ rho @ u.conj().T)

    out: dict[str, float] = {}
    for record, rho in evolve(circ, records, step).items():
        prob = float(np.real(np.trace(rho)))
        if prob > 1e-15:
            # jobkeeper's count keys (DESIGN: registers in declaration order, "|"
            # between them, each register's value in binary)
            key = "|".join(
                "".join(str((record >> (reg.offset + i)) & 1) for i in reversed(range(reg.size)))
                for reg in circ.cregs
            )
            out[key] = out.get(key, 0.0) + prob
    return out
