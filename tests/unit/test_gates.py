"""Gate matrices and kernels of the state-vector simulator.

Sources of the reference values, beside each check:
- the published header definitions of the standard gates (OpenQASM 2.0 qelib1.inc,
  arXiv:1707.03429, and the later extended headers), as expanded to U/CX by
  jobkeeper.circuit.stdgates.expand_standard, with U(θ,φ,λ) = Rz(φ)Ry(θ)Rz(λ) per the
  OpenQASM 2.0 specification;
- scipy.linalg.expm of the Pauli generators for rotation gates;
- brute-force full matrices over basis states (common practice) for the kernels.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.linalg import expm

from jobkeeper.backends.sim import kernels
from jobkeeper.backends.sim.fusion import fuse
from jobkeeper.backends.sim.gates import STANDARD_GATES, gate_matrix, signature
from jobkeeper.circuit.stdgates import expand_standard
from tests.unit.test_statevector_helpers import (
    PAULI_X,
    PAULI_Y,
    PAULI_Z,
    on_register,
    spec_u,
)

CX = np.array([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]], dtype=complex)


def equal_up_to_phase(a: np.ndarray, b: np.ndarray, tol: float = 1e-12) -> bool:
    overlap = np.vdot(b.ravel(), a.ravel())
    if abs(overlap) < 1e-9:
        return False
    return bool(np.abs(a - overlap / abs(overlap) * b).max() < tol)


def from_definition(name: str, params: tuple[float, ...]) -> np.ndarray:
    width = signature(name)[0]  # type: ignore[index]
    total = np.eye(1 << width, dtype=complex)
    for prim, positions, values in expand_standard(name, params):
        matrix = spec_u(*values) if prim == "U" else CX
        total = on_register(matrix, positions, width) @ total
    return total


def test_simulator_knows_exactly_the_standard_gates() -> None:
    from jobkeeper.circuit.stdgates import STANDARD_GATES as PUBLISHED

    assert set(STANDARD_GATES) == set(PUBLISHED)


@pytest.mark.parametrize("name", sorted(STANDARD_GATES))
def test_gate_matrix_equals_its_published_definition(name: str) -> None:
    # Source: the gate's header definition (qelib1.inc / extended header) composed from
    # U and CX, U per the OpenQASM 2.0 spec; equal up to a global phase.
    rng = np.random.default_rng(sum(map(ord, name)))
    num_params = signature(name)[1]  # type: ignore[index]
    for _ in range(3 if num_params else 1):
        params = tuple(float(x) for x in rng.uniform(-np.pi, np.pi, num_params))
        mine = gate_matrix(name, params)
        assert np.allclose(mine @ mine.conj().T, np.eye(len(mine)), atol=1e-12)
        assert equal_up_to_phase(mine, from_definition(name, params)), (name, params)


def test_original_cu3_is_not_controlled_u3() -> None:
    # Source: OpenQASM 2.0 qelib1.inc cu3 body (no u1((λ+φ)/2) on the control): it is
    # controlled-u3 times diag(1, e^{-i(φ+λ)/2}) on the control, which is observable;
    # it equals the control of Rz(φ)Ry(θ)Rz(λ), whose phase differs from u3's.
    theta, phi, lam = 0.7, 0.4, 1.1
    c, s = np.cos(theta / 2), np.sin(theta / 2)
    # u3 as the header's matrix (from memory, arXiv:1707.03429 eq. for U up to phase).
    u3 = np.array(
        [[c, -np.exp(1j * lam) * s], [np.exp(1j * phi) * s, np.exp(1j * (phi + lam)) * c]]
    )
    controlled_u3 = np.eye(4, dtype=complex)
    controlled_u3[2:, 2:] = u3
    cu3 = gate_matrix("cu3", (theta, phi, lam))
    assert not equal_up_to_phase(cu3, controlled_u3)
    controlled_spec_u = np.eye(4, dtype=complex)
    controlled_spec_u[2:, 2:] = spec_u(theta, phi, lam)
    assert equal_up_to_phase(cu3, controlled_spec_u)


@pytest.mark.parametrize(
    ("name", "generator"),
    [
        ("rx", PAULI_X),
        ("ry", PAULI_Y),
        ("rz", PAULI_Z),
        ("rxx", np.kron(PAULI_X, PAULI_X)),
        ("rzz", np.kron(PAULI_Z, PAULI_Z)),
    ],
)
def test_rotations_are_exponentials_of_paulis(name: str, generator: np.ndarray) -> None:
    # Source: scipy.linalg.expm(-iθP/2); rz only up to a global phase (rz = u1 in qelib1).
    for theta in (0.3, -1.2, np.pi, 2.5):
        assert equal_up_to_phase(gate_matrix(name, (theta,)), expm(-0.5j * theta * generator))
    assert np.allclose(gate_matrix("rx", (0.3,)), expm(-0.15j * PAULI_X), atol=1e-14)


def _random_unitary(rng: np.random.Generator, k: int) -> np.ndarray:
    z = rng.normal(size=(1 << k, 1 << k)) + 1j * rng.normal(size=(1 << k, 1 << k))
    q, r = np.linalg.qr(z)
    return q * (np.diagonal(r) / np.abs(np.diagonal(r)))


def _reference(
    state: np.ndarray, n: int, matrix: np.ndarray, qubits: tuple[int, ...]
) -> np.ndarray:
    # Textbook tensor contraction (common practice): the state as an n-index tensor
    # (axis i is qubit n-1-i), the gate's input indices contracted with its qubits' axes.
    k = len(qubits)
    if n <= 4:  # and, where it is cheap, the full 2^n matrix built over basis states
        return on_register(matrix, tuple(n - 1 - q for q in qubits), n) @ state
    axes = [n - 1 - q for q in qubits]
    tensor = np.tensordot(
        matrix.reshape((2,) * (2 * k)), state.reshape((2,) * n), (list(range(k, 2 * k)), axes)
    )
    return np.moveaxis(tensor, list(range(k)), axes).reshape(-1)


@pytest.mark.parametrize("chunk", [kernels.CHUNK, 16])
@pytest.mark.parametrize("n", [1, 3, 6, 11])
def test_kernels_match_full_matrices(monkeypatch: pytest.MonkeyPatch, chunk: int, n: int) -> None:
    # A small CHUNK forces the chunked loops on small states; n = 11 takes the path for
    # a single high target (2^10 amplitudes below it).
    monkeypatch.setattr(kernels, "CHUNK", chunk)
    rng = np.random.default_rng(n * 1000 + chunk)
    cases: list[tuple[int, ...]] = [(n - 1,), (0,)]
    if n > 5:  # high and low targets together, in either order
        cases += [(n - 1, 0), (1, n - 1, 0), (n - 2, 3), (2, n - 2)]
    for k in range(1, min(n, 4) + 1):
        cases += [tuple(int(q) for q in rng.choice(n, k, replace=False)) for _ in range(4)]
        cases.append(tuple(range(n - 1, n - 1 - k, -1)))  # consecutive: the direct path
    for qubits in cases:
        k = len(qubits)
        state = rng.normal(size=1 << n) + 1j * rng.normal(size=1 << n)
        phases = np.exp(1j * rng.uniform(0, 2 * np.pi, 1 << k))
        matrices = {
            "dense": _random_unitary(rng, k),
            "diagonal": np.diag(phases),
            # A cyclic shift: never the identity permutation.
            "monomial": np.roll(np.eye(1 << k), int(rng.integers(1, 1 << k)), axis=0) * phases,
        }
        for kind, matrix in matrices.items():
            assert kernels.classify(matrix) == kind
            got = state.copy()
            kernels.apply(got, n, matrix.astype(complex), qubits, kind)
            assert np.allclose(got, _reference(state, n, matrix, qubits), atol=1e-12), (
                kind,
                qubits,
            )


def test_classify_recognises_identity_and_permutation_gates() -> None:
    assert kernels.classify(gate_matrix("id")) == "identity"
    assert kernels.classify(gate_matrix("cz")) == "diagonal"
    for name in ("x", "y", "cx", "swap", "ccx", "cswap", "c3x", "rccx"):
        assert kernels.classify(gate_matrix(name)) == "monomial", name
    assert kernels.classify(gate_matrix("h")) == "dense"


gate_lists = st.lists(
    st.tuples(
        st.integers(1, 3),
        st.lists(st.integers(0, 5), min_size=3, max_size=3, unique=True),
        st.integers(0, 2**32 - 1),
    ),
    min_size=1,
    max_size=25,
)


@settings(max_examples=25, deadline=None)
@given(gate_lists, st.integers(1, 5))
def test_fused_blocks_equal_the_gates_applied_in_order(
    spec: list[tuple[int, list[int], int]], width: int
) -> None:
    # Brute-force reference (common practice): each gate as a full matrix, in order.
    n = 6
    gates = []
    for k, qubits, seed in spec:
        gates.append((tuple(qubits[:k]), _random_unitary(np.random.default_rng(seed), k)))
    expected = np.zeros(1 << n, dtype=complex)
    expected[0] = 1
    for qubits, matrix in gates:
        expected = _reference(expected, n, matrix, qubits)
    state = np.zeros(1 << n, dtype=complex)
    state[0] = 1
    blocks = fuse(gates, width)
    for block in blocks:
        assert len(block.qubits) <= max(width, 3)
        kernels.apply(state, n, block.matrix, block.qubits, block.kind)
    assert np.allclose(state, expected, atol=1e-10)
