"""Operations on ρ stored as a vector, in place where possible.

Layout: a flat complex128 array of 4^n entries, ρ[r, c] at index r·2^n + c (row-major),
so row qubit q is bit n + q of the index and column qubit q is bit q. Gates and channels
are applied by the state-vector kernels on this 2n-qubit vector (:mod:`.density_program`);
what is here needs the (row, column) pairing: the diagonal, measurement, reset and the
outcome distribution with readout error.

States are kept unnormalised: the trace of a classical record's ρ is the probability of
that record, so merging records is a sum and no division can lose precision.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import numpy.typing as npt

from jobkeeper.backends.sim.kernels import State
from jobkeeper.backends.sim.sampling import reading_axes

Floats = npt.NDArray[np.float64]


def initial_density(n: int) -> State:
    """|0…0⟩⟨0…0| on n qubits."""
    rho = np.zeros(1 << (2 * n), dtype=np.complex128)
    rho[0] = 1.0
    return rho


def as_matrix(rho: State, n: int) -> npt.NDArray[np.complex128]:
    """The 2^n × 2^n matrix view of ρ (basis index bit q = qubit q)."""
    return rho.reshape(1 << n, 1 << n)


def diagonal(rho: State, n: int) -> Floats:
    """The populations ρ[i, i] (a copy, real part; imaginary parts are rounding)."""
    return np.ascontiguousarray(rho[:: (1 << n) + 1].real)


def trace(rho: State, n: int) -> float:
    return float(rho[:: (1 << n) + 1].real.sum())


def conjugate_transpose(rho: State, n: int) -> None:
    """ρ ↦ ρ† in place, by square tiles of at most 256 × 256 (1 MiB: the tile and its
    mirror stay in cache, and no second copy of ρ is needed)."""
    matrix = as_matrix(rho, n)
    dim = 1 << n
    tile = min(dim, 256)
    for i in range(0, dim, tile):
        diagonal_tile = matrix[i : i + tile, i : i + tile]
        diagonal_tile[...] = diagonal_tile.conj().T
        for j in range(i + tile, dim, tile):
            upper = matrix[i : i + tile, j : j + tile].copy()
            matrix[i : i + tile, j : j + tile] = matrix[j : j + tile, i : i + tile].conj().T
            matrix[j : j + tile, i : i + tile] = upper.conj().T


def _pair(rho: State, n: int, qubit: int) -> State:
    # Axes: (rows above q, row bit q, rows below q and columns above q, column bit q,
    # columns below q): index bits 2n−1 … n+q+1 | n+q | n+q−1 … q+1 | q | q−1 … 0.
    return rho.reshape(1 << (n - 1 - qubit), 2, 1 << (n - 1), 2, 1 << qubit)


def measure(rho: State, n: int, qubit: int, error: float) -> tuple[State, State]:
    """The unnormalised states of reading 0 and reading 1 on ``qubit``, when a reading
    is flipped with probability ``error``: reading b ↦ (1 − e)·P_b ρ P_b + e·P_b̄ ρ P_b̄
    (the qubit collapses to the true outcome; only the record can be wrong). ``rho``
    becomes the reading-0 state; the reading-1 state is a new array."""
    view = _pair(rho, n, qubit)
    view[:, 0, :, 1, :] = 0
    view[:, 1, :, 0, :] = 0
    one = rho.copy()
    one_view = _pair(one, n, qubit)
    if error == 0.0:
        view[:, 1, :, 1, :] = 0
        one_view[:, 0, :, 0, :] = 0
    else:
        view[:, 0, :, 0, :] *= 1.0 - error
        view[:, 1, :, 1, :] *= error
        one_view[:, 0, :, 0, :] *= error
        one_view[:, 1, :, 1, :] *= 1.0 - error
    return rho, one


def reset(rho: State, n: int, qubit: int, error: float) -> None:
    """Reset ``qubit`` in place: measure it and apply X when it reads 1. With a reading
    flipped with probability ``error`` the qubit ends in |1⟩ with that probability, so
    ρ ↦ Tr_q(ρ) ⊗ diag(1 − e, e): exact, no branching."""
    view = _pair(rho, n, qubit)
    view[:, 0, :, 0, :] += view[:, 1, :, 1, :]
    view[:, 0, :, 1, :] = 0
    view[:, 1, :, 0, :] = 0
    if error == 0.0:
        view[:, 1, :, 1, :] = 0
    else:
        np.multiply(view[:, 0, :, 0, :], error, out=view[:, 1, :, 1, :])
        view[:, 0, :, 0, :] *= 1.0 - error


def readout_distribution(
    populations: Floats, n: int, qubits: Sequence[int], errors: Sequence[float]
) -> Floats:
    """Probabilities of the readings of ``qubits`` (index bit j = reading of qubits[j],
    as in :func:`.sampling.marginal`), each reading flipped with probability
    ``errors[j]``: the marginal of the populations times a 2 × 2 stochastic matrix per
    measured bit, exactly."""
    out = reading_axes(np.maximum(populations, 0.0), n, qubits)
    # Axis a of ``out`` is reading j = m − 1 − a.
    m = len(qubits)
    for j, e in enumerate(errors):
        if e:
            axis = m - 1 - j
            out = (1.0 - e) * out + e * np.flip(out, axis=axis)
    return np.ascontiguousarray(out).reshape(-1)
