"""Every route of the dense kernel against explicit full matrices.

apply_dense picks a route by the targets (low rows, split halves, direct blocks, gather)
and cuts the state into chunks; each route and each chunking must give the same state as
the gate's full 2^n × 2^n matrix.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from jobkeeper.backends.sim import kernels

N = 10


def _expected(state: np.ndarray, matrix: np.ndarray, qubits: tuple[int, ...]) -> np.ndarray:
    # Common practice: move the targets to the lowest qubits (the first listed most
    # significant), apply the full matrix kron(identity, gate) built with np.kron, and
    # move them back.
    n = state.size.bit_length() - 1
    k = len(qubits)
    others = [q for q in range(n) if q not in qubits]
    index = np.arange(1 << n)
    moved = np.zeros_like(index)
    for j, q in enumerate(qubits):
        moved |= ((index >> q) & 1) << (k - 1 - j)
    for j, q in enumerate(others):
        moved |= ((index >> q) & 1) << (k + j)
    full = np.kron(np.eye(1 << (n - k)), matrix)
    permuted = np.empty_like(state)
    permuted[moved] = state
    return (full @ permuted)[moved]


def _random_unitary(rng: np.random.Generator, k: int) -> np.ndarray:
    z = rng.normal(size=(1 << k, 1 << k)) + 1j * rng.normal(size=(1 << k, 1 << k))
    return np.linalg.qr(z)[0]


@pytest.fixture(params=[None, 32, 256])
def chunking(request: pytest.FixtureRequest, monkeypatch: pytest.MonkeyPatch) -> int | None:
    # Small chunks make a 2^10 state take the loops that a 24-qubit state takes.
    if request.param is not None:
        monkeypatch.setattr(kernels, "CHUNK", request.param)
        monkeypatch.setattr(kernels, "LOW_CHUNK", dict.fromkeys(kernels.LOW_CHUNK, request.param))
    return request.param


def _check(qubits: tuple[int, ...], rng: np.random.Generator) -> None:
    matrix = _random_unitary(rng, len(qubits))
    state = rng.normal(size=1 << N) + 1j * rng.normal(size=1 << N)
    expected = _expected(state, matrix, qubits)
    kernels.apply_dense(state, N, matrix, qubits)
    assert np.allclose(state, expected, atol=1e-12), qubits


def test_one_qubit_gate_on_every_target(chunking: int | None) -> None:
    rng = np.random.default_rng(1)
    for target in range(N):
        _check((target,), rng)


def test_two_qubit_gate_on_every_pair_in_both_orders(chunking: int | None) -> None:
    rng = np.random.default_rng(2)
    for pair in itertools.permutations(range(N), 2):
        _check(pair, rng)


def test_wider_gates_on_low_high_and_spread_targets(chunking: int | None) -> None:
    rng = np.random.default_rng(3)
    cases = [(2, 1, 0), (0, 3, 1), (5, 4, 3), (8, 7, 6), (8, 0, 4), (3, 2, 1, 0), (7, 6, 5, 4)]
    cases += [(4, 3, 2, 1, 0), (9, 8, 7, 6, 5), (6, 2, 5, 1), (1, 8), (9, 0, 5, 2, 7)]
    for qubits in cases:
        _check(qubits, rng)


def test_one_and_two_qubit_registers() -> None:
    rng = np.random.default_rng(4)
    for n, qubits in ((1, (0,)), (2, (0,)), (2, (1,)), (2, (1, 0)), (2, (0, 1))):
        matrix = _random_unitary(rng, len(qubits))
        state = rng.normal(size=1 << n) + 1j * rng.normal(size=1 << n)
        expected = _expected(state, matrix, qubits)
        kernels.apply_dense(state, n, matrix, qubits)
        assert np.allclose(state, expected, atol=1e-12), (n, qubits)


def test_high_target_with_matrices_that_are_not_phased_rotations(chunking: int | None) -> None:
    # The high single-target route writes a unitary as phases around a real rotation;
    # a zero entry or a matrix that is not unitary (a noise channel's operator) must
    # take another route with the same result.
    rng = np.random.default_rng(5)
    hadamard_like = np.array([[1, 1], [1, -1]]) / np.sqrt(2)
    matrices = [
        hadamard_like,
        np.array([[0, 1j], [1, 0]]),
        np.array([[0.6, 0], [0.3j, 0.8]]),
        rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2)),
        _random_unitary(rng, 1),
    ]
    for matrix in matrices:
        for target in (N - 1, N - 3, 4):
            state = rng.normal(size=1 << N) + 1j * rng.normal(size=1 << N)
            expected = _expected(state, matrix.astype(complex), (target,))
            kernels.apply_dense(state, N, matrix.astype(complex), (target,))
            assert np.allclose(state, expected, atol=1e-12), (matrix, target)
