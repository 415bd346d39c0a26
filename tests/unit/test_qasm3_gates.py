"""Gate modifiers and the standard library of OpenQASM 3 against textbook matrices.

Sources: Nielsen & Chuang, "Quantum Computation and Quantum Information", section 4.2
(X, Y, Z, H, S, T), 4.3 (controlled operations, Toffoli); the OpenQASM 3 specification
(../shared/corpus/qasm3/spec/gates.rst "Quantum gate modifiers" and standard_library.rst)
for sx = √X by the principal root, p(λ) = diag(1, e^{iλ}) = ctrl @ gphase(λ), and
negctrl (control on |0>). Matrices are built here from those definitions; the circuit's
matrix is built from the IR by index arithmetic (tests/unit/test_statevector_helpers).
"""

from __future__ import annotations

import cmath
import math

import numpy as np
import pytest

from jobkeeper.backends.sim.gates import gate_matrix
from jobkeeper.circuit import Circuit, parse_qasm
from jobkeeper.circuit.qasm3.modifiers import MatrixSink
from jobkeeper.circuit.qasm3.stdlib import STANDARD_LIBRARY
from jobkeeper.circuit.qasm3.unitary import angles_of, principal_power, u3_matrix
from tests.unit.test_statevector_helpers import on_register

I2 = np.eye(2)
X = np.array([[0, 1], [1, 0]], dtype=complex)
Y = np.array([[0, -1j], [1j, 0]])
Z = np.diag([1, -1]).astype(complex)
H = np.array([[1, 1], [1, -1]]) / math.sqrt(2)
S = np.diag([1, 1j])
T = np.diag([1, cmath.exp(1j * math.pi / 4)])
SX = np.array([[1 + 1j, 1 - 1j], [1 - 1j, 1 + 1j]]) / 2  # √X, principal root


def P(lam: float) -> np.ndarray:
    return np.diag([1, cmath.exp(1j * lam)])


def controlled(u: np.ndarray, controls: int = 1) -> np.ndarray:
    """|1..1><1..1| ⊗ U + (I - |1..1><1..1|) ⊗ I, controls first (N&C section 4.3)."""
    dim = u.shape[0] << controls
    out = np.eye(dim, dtype=complex)
    out[dim - u.shape[0] :, dim - u.shape[0] :] = u
    return out


def unitary(circuit: Circuit) -> np.ndarray:
    n = circuit.num_qubits
    out = np.eye(1 << n, dtype=complex)
    for op in circuit.operations:
        out = on_register(gate_matrix(op.name, op.params), op.qubits, n) @ out
    return out


def program(n: int, line: str) -> Circuit:
    return parse_qasm(f'OPENQASM 3.0;\ninclude "stdgates.inc";\nqubit[{n}] q;\n{line}\n')


def equal_up_to_phase(a: np.ndarray, b: np.ndarray) -> bool:
    k = np.unravel_index(np.argmax(np.abs(b)), b.shape)
    phase = a[k] / b[k]
    return abs(abs(phase) - 1) < 1e-9 and np.allclose(a, phase * b, atol=1e-9)


@pytest.mark.parametrize(
    ("line", "n", "expected", "exact_phase"),
    [
        ("inv @ s q[0];", 1, S.conj().T, False),
        ("pow(2) @ t q[0];", 1, S, False),
        ("pow(0.5) @ x q[0];", 1, SX, False),
        ("ctrl @ gphase(0.7) q[0];", 1, P(0.7), True),
        ("ctrl @ x q[0], q[1];", 2, controlled(X), True),
        ("ctrl(2) @ x q[0], q[1], q[2];", 3, controlled(X, 2), True),
        ("ctrl @ ctrl @ x q[0], q[1], q[2];", 3, controlled(X, 2), True),
        ("ctrl(3) @ x q[0], q[1], q[2], q[3];", 4, controlled(X, 3), True),
        ("ctrl @ pow(0.5) @ x q[0], q[1];", 2, controlled(SX), True),
        ("ctrl @ s q[0], q[1];", 2, controlled(S), True),
        ("ctrl @ h q[0], q[1];", 2, controlled(H), True),
        ("ctrl @ y q[0], q[1];", 2, controlled(Y), True),
        ("ctrl(2) @ h q[0], q[1], q[2];", 3, controlled(H, 2), True),
        ("ctrl(2) @ gphase(0.3) q[0], q[1];", 2, controlled(P(0.3), 1), True),
        ("ctrl(3) @ gphase(0.3) q[0], q[1], q[2];", 3, controlled(P(0.3), 2), True),
        ("ctrl(5) @ x q[0], q[1], q[2], q[3], q[4], q[5];", 6, controlled(X, 5), True),
        ("ctrl @ pow(0.5) @ s q[0], q[1];", 2, controlled(T), True),
        ("ctrl @ inv @ pow(0.25) @ z q[0], q[1];", 2, controlled(T.conj().T), True),
        ("inv @ ctrl @ t q[0], q[1];", 2, controlled(T.conj().T), True),
        ("pow(-1) @ ctrl @ t q[0], q[1];", 2, controlled(T.conj().T), True),
        ("pow(3) @ ctrl @ s q[0], q[1];", 2, controlled(S.conj().T), True),
        ("ctrl @ U(0.4, 0.5, 0.6) q[0], q[1];", 2, controlled(cmath.exp(0.2j) * u3_matrix(0.4, 0.5, 0.6)), True),
    ],
)  # fmt: skip
def test_modifiers_give_the_textbook_matrix(
    line: str, n: int, expected: np.ndarray, exact_phase: bool
) -> None:
    got = unitary(program(n, line))
    if exact_phase:
        assert np.allclose(got, expected, atol=1e-9)
    else:
        assert equal_up_to_phase(got, expected)


def test_negctrl_controls_on_zero() -> None:
    # specification gates.rst: negctrl @ g applies g when the control is |0>.
    expected = np.kron(np.diag([1, 0]), X) + np.kron(np.diag([0, 1]), I2)
    assert np.allclose(unitary(program(2, "negctrl @ x q[0], q[1];")), expected)
    mixed = unitary(program(3, "ctrl @ negctrl @ x q[0], q[1], q[2];"))
    proj = np.zeros((8, 8))
    for i in range(8):
        proj[i, i] = 1
    expected3 = np.eye(8, dtype=complex)
    expected3[4:6, 4:6] = X  # q0 = 1, q1 = 0 flips q2
    assert np.allclose(mixed, expected3)


@pytest.mark.parametrize(
    ("line", "twin"),
    [
        ("inv @ s q[0];", "sdg q[0];"),
        ("inv @ t q[0];", "tdg q[0];"),
        ("inv @ sx q[0];", "sxdg q[0];"),
        ("ctrl @ x q[0], q[1];", "cx q[0],q[1];"),
        ("ctrl(2) @ x q[0], q[1], q[2];", "ccx q[0],q[1],q[2];"),
        ("ctrl @ gphase(0.5) q[0];", "p(0.5) q[0];"),
        ("ctrl @ rz(0.5) q[0], q[1];", "crz(0.5) q[0],q[1];"),
        ("ctrl @ phase(0.5) q[0], q[1];", "cp(0.5) q[0],q[1];"),
        ("cphase(0.5) q[0], q[1];", "cp(0.5) q[0],q[1];"),
        ("phase(0.5) q[0];", "p(0.5) q[0];"),
        ("CX q[0], q[1];", "cx q[0],q[1];"),
        ("U(0.1, 0.2, 0.3) q[0];", "U(0.1,0.2,0.3) q[0];"),
        ("inv @ rx(0.5) q[0];", "rx(-0.5) q[0];"),
        ("ctrl @ swap q[0], q[1], q[2];", "cswap q[0],q[1],q[2];"),
    ],
)
def test_named_results_hash_as_their_twins(line: str, twin: str) -> None:
    from jobkeeper.circuit import circuit_hash

    n = 3
    two = parse_qasm(f'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[{n}];\n{twin}\n')
    assert circuit_hash(program(n, line)) == circuit_hash(two)


@pytest.mark.parametrize("name", sorted(STANDARD_LIBRARY))
def test_each_library_gate_maps_to_an_ir_gate_of_its_definition(name: str) -> None:
    # An unmodified call becomes one IR gate; its matrix must be the matrix of the
    # library's own definition (expanded through U and gphase), up to global phase, and
    # the controlled form (which makes that phase relative) must be exact.
    gate = STANDARD_LIBRARY[name]
    params = ", ".join(str(0.3 + 0.2 * i) for i in range(len(gate.params)))
    call = f"{name}({params})" if params else name
    k = len(gate.qubits)
    qubits = ", ".join(f"q[{i}]" for i in range(k))
    named = unitary(program(k, f"{call} {qubits};"))
    # pow(1) @ forces nothing; ctrl @ with an expansion compares relative phase: a
    # controlled named gate (cx, cp...) against the expanded definition (via inv @ inv @).
    plain = unitary(program(k, f"inv @ inv @ {call} {qubits};"))
    assert equal_up_to_phase(named, plain)
    ctrl_qubits = ", ".join(f"q[{i}]" for i in range(k + 1))
    assert np.allclose(
        unitary(program(k + 1, f"ctrl @ {call} {ctrl_qubits};")),
        controlled(_definition_matrix(name, [0.3 + 0.2 * i for i in range(len(gate.params))])),
        atol=1e-9,
    )


def _definition_matrix(name: str, params: list[float]) -> np.ndarray:
    """The library gate's exact matrix (global phase included) from the specification's
    standard_library.rst, written out here."""
    c = {
        "x": X, "y": Y, "z": Z, "h": H, "s": S, "sdg": S.conj().T, "t": T, "tdg": T.conj().T,
        "sx": SX, "id": I2,
    }  # fmt: skip
    if name in c:
        return c[name]
    if name in ("p", "phase", "u1"):
        return P(params[0])
    if name in ("rx", "ry", "rz"):
        pauli = {"rx": X, "ry": Y, "rz": Z}[name]
        th = params[0]
        return math.cos(th / 2) * I2 - 1j * math.sin(th / 2) * pauli
    if name == "u3":
        th, ph, la = params
        return cmath.exp(-0.5j * (ph + la)) * u3_matrix(th, ph, la)
    if name == "u2":
        ph, la = params
        return cmath.exp(-0.5j * (ph + la)) * u3_matrix(math.pi / 2, ph, la)
    if name in ("cx", "CX"):
        return controlled(X)
    if name == "cy":
        return controlled(Y)
    if name == "cz":
        return controlled(Z)
    if name == "ch":
        return controlled(H)
    if name in ("cp", "cphase"):
        return controlled(P(params[0]))
    if name in ("crx", "cry", "crz"):
        return controlled(_definition_matrix(name[1:], params))
    if name == "cu":
        th, ph, la, ga = params
        return controlled(cmath.exp(1j * ga) * u3_matrix(th, ph, la))
    if name == "ccx":
        return controlled(X, 2)
    swap = np.eye(4)[[0, 2, 1, 3]].astype(complex)
    if name == "swap":
        return swap
    if name == "cswap":
        return controlled(swap)
    raise AssertionError(name)


def test_principal_power_and_angles_round_trip() -> None:
    # Principal root (specification gates.rst, pow): X^(1/2) is SX, Z^(1/2) is S.
    assert np.allclose(principal_power(X, 0.5), SX)
    assert np.allclose(principal_power(Z, 0.5), S)
    rng = np.random.default_rng(7)
    for _ in range(50):
        th, ph, la, al = rng.uniform(-3, 3, 4)
        m = cmath.exp(1j * al) * u3_matrix(th, ph, la)
        assert np.allclose(u3_matrix(*angles_of(m)), m, atol=1e-9)
    sink = MatrixSink(lambda message: (_ for _ in ()).throw(AssertionError(message)))  # type: ignore[arg-type]
    sink.gphase(0.5, ())
    assert np.allclose(sink.matrix, cmath.exp(0.5j) * I2)
