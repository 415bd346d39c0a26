"""Unitary matrices of the standard gates, as the state-vector simulator applies them.

Convention: for a gate on qubits ``(q0, q1, ...)`` as listed in the operation, ``q0`` is
the most significant bit of the matrix index (the textbook convention: ``cx`` is
``[[1,0,0,0],[0,1,0,0],[0,0,0,1],[0,0,1,0]]`` with the control listed first).

Each matrix means what the gate's published header definition means, up to a global
phase (which no measurement can see). Where a header body is not the gate its name
suggests, the body wins: ``cu3`` lacks the control phase ``u1((λ+φ)/2)`` of a true
controlled-u3 in the original header. The definitions are those of
:mod:`jobkeeper.circuit.stdgates` (where ``c4x`` is a true 4-controlled X, see there
why); ``tests/unit/test_gates.py`` checks every matrix against them.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import lru_cache

import numpy as np
import numpy.typing as npt

Matrix = npt.NDArray[np.complex128]

_I2 = np.eye(2, dtype=np.complex128)
_SQRT_HALF = 1 / np.sqrt(2)


def _m(rows: list[list[complex]]) -> Matrix:
    return np.array(rows, dtype=np.complex128)


def u3(theta: float, phi: float, lam: float) -> Matrix:
    """U(θ,φ,λ) = Rz(φ)Ry(θ)Rz(λ) up to global phase (OpenQASM 2.0 spec, section 3)."""
    c, s = np.cos(theta / 2), np.sin(theta / 2)
    return _m(
        [
            [c, -np.exp(1j * lam) * s],
            [np.exp(1j * phi) * s, np.exp(1j * (phi + lam)) * c],
        ]
    )


def _phase(lam: float) -> Matrix:
    return _m([[1, 0], [0, np.exp(1j * lam)]])


def controlled(u: Matrix, controls: int = 1) -> Matrix:
    """``u`` applied when every one of the leading ``controls`` qubits is 1."""
    dim = u.shape[0] << controls
    out = np.eye(dim, dtype=np.complex128)
    out[dim - u.shape[0] :, dim - u.shape[0] :] = u
    return out


def embed(matrix: Matrix, positions: tuple[int, ...], width: int) -> Matrix:
    """A gate on ``positions`` of a ``width``-qubit register, as a 2^width matrix
    (position 0 being the most significant bit)."""
    rows, cols, source = _embedding(positions, width)
    out = np.zeros((1 << width, 1 << width), dtype=np.complex128)
    out[rows, cols] = matrix.reshape(-1)[source]
    return out


@lru_cache(maxsize=1024)
def _embedding(
    positions: tuple[int, ...], width: int
) -> tuple[npt.NDArray[np.intp], npt.NDArray[np.intp], npt.NDArray[np.intp]]:
    """Where each entry of a gate on ``positions`` lands in its 2^width embedding: entry
    (r, c) of the embedding is gate entry (r at positions, c at positions) when r and c
    agree on every other bit, else 0. Fusing small circuits embeds a gate per gate, and
    tensordot on tiny arrays cost more than the whole simulation (measured: 60% of a
    3-gate, 2-qubit job); cached index arrays make an embedding three numpy calls."""
    k = len(positions)
    shifts = np.array([width - 1 - p for p in positions], dtype=np.intp)
    rest = [b for b in range(width) if width - 1 - b not in positions]
    # Every index of the embedding: its bits at `positions` (a gate index, first position
    # most significant) and its other bits.
    index = np.arange(1 << width, dtype=np.intp)
    sub = np.zeros(1 << width, dtype=np.intp)
    for j, shift in enumerate(shifts):
        sub |= ((index >> shift) & 1) << (k - 1 - j)
    other = np.zeros(1 << width, dtype=np.intp)
    for j, bit in enumerate(rest):
        other |= ((index >> bit) & 1) << j
    rows, cols = np.nonzero(other[:, None] == other[None, :])
    source = sub[rows] * (1 << k) + sub[cols]
    for array in (rows, cols, source):
        array.setflags(write=False)
    return rows, cols, source


def kron(a: Matrix, b: Matrix) -> Matrix:
    """np.kron for two small square matrices, in one broadcast product (np.kron's generic
    reshaping costs ten times more at these sizes)."""
    da, db = a.shape[0], b.shape[0]
    return (a[:, None, :, None] * b[None, :, None, :]).reshape(da * db, da * db)


_X = _m([[0, 1], [1, 0]])
_Y = _m([[0, -1j], [1j, 0]])
_Z = _m([[1, 0], [0, -1]])
_H = _m([[_SQRT_HALF, _SQRT_HALF], [_SQRT_HALF, -_SQRT_HALF]])
_SX = _m([[0.5 + 0.5j, 0.5 - 0.5j], [0.5 - 0.5j, 0.5 + 0.5j]])
_SWAP = _m([[1, 0, 0, 0], [0, 0, 1, 0], [0, 1, 0, 0], [0, 0, 0, 1]])


def _rx(theta: float) -> Matrix:
    c, s = np.cos(theta / 2), np.sin(theta / 2)
    return _m([[c, -1j * s], [-1j * s, c]])


def _ry(theta: float) -> Matrix:
    c, s = np.cos(theta / 2), np.sin(theta / 2)
    return _m([[c, -s], [s, c]])


def _rz(phi: float) -> Matrix:
    return _m([[np.exp(-0.5j * phi), 0], [0, np.exp(0.5j * phi)]])


def _rxx(theta: float) -> Matrix:
    # exp(-iθ X⊗X / 2) = cos(θ/2) I − i sin(θ/2) X⊗X
    c, s = np.cos(theta / 2), np.sin(theta / 2)
    return np.asarray(c * np.eye(4) - 1j * s * np.kron(_X, _X), dtype=np.complex128)


def _rzz(theta: float) -> Matrix:
    a, b = np.exp(-0.5j * theta), np.exp(0.5j * theta)
    return np.diag(np.array([a, b, b, a], dtype=np.complex128))


def _cu3_header(theta: float, phi: float, lam: float) -> Matrix:
    # The original header's cu3 body applies e^{-i(φ+λ)/2}·u3 when the control is 1:
    # controlled-u3 times diag(1, e^{-i(φ+λ)/2}) on the control.
    return controlled(np.exp(-0.5j * (phi + lam)) * u3(theta, phi, lam))


def _rccx() -> Matrix:
    # Margolus' relative-phase Toffoli: iY on the target when both controls are 1,
    # and a sign on |101⟩ (worked out from its header body; checked in the tests).
    out = np.eye(8, dtype=np.complex128)
    out[5, 5] = -1
    out[6:, 6:] = _m([[0, -1j], [1j, 0]])
    return out


def _rc3x() -> Matrix:
    # Relative-phase 3-controlled X (from its header body; checked in the tests).
    out = np.eye(16, dtype=np.complex128)
    out[12, 12], out[13, 13] = 1j, -1j
    out[14:, 14:] = _m([[0, 1], [-1, 0]])
    return out


#: name → (number of qubits, number of parameters, matrix builder).
_GATES: dict[str, tuple[int, int, Callable[..., Matrix]]] = {
    "u3": (1, 3, u3),
    "u": (1, 3, u3),
    "u2": (1, 2, lambda phi, lam: u3(np.pi / 2, phi, lam)),
    "u1": (1, 1, _phase),
    "p": (1, 1, _phase),
    "u0": (1, 1, lambda _gamma: _I2),
    "id": (1, 0, lambda: _I2),
    "x": (1, 0, lambda: _X),
    "y": (1, 0, lambda: _Y),
    "z": (1, 0, lambda: _Z),
    "h": (1, 0, lambda: _H),
    "s": (1, 0, lambda: _phase(np.pi / 2)),
    "sdg": (1, 0, lambda: _phase(-np.pi / 2)),
    "t": (1, 0, lambda: _phase(np.pi / 4)),
    "tdg": (1, 0, lambda: _phase(-np.pi / 4)),
    "sx": (1, 0, lambda: _SX),
    "sxdg": (1, 0, lambda: _SX.conj()),
    "rx": (1, 1, _rx),
    "ry": (1, 1, _ry),
    "rz": (1, 1, _rz),
    "cx": (2, 0, lambda: controlled(_X)),
    "cy": (2, 0, lambda: controlled(_Y)),
    "cz": (2, 0, lambda: controlled(_Z)),
    "ch": (2, 0, lambda: controlled(_H)),
    "csx": (2, 0, lambda: controlled(_SX)),
    "swap": (2, 0, lambda: _SWAP),
    "crx": (2, 1, lambda lam: controlled(_rx(lam))),
    "cry": (2, 1, lambda lam: controlled(_ry(lam))),
    "crz": (2, 1, lambda lam: controlled(_rz(lam))),
    "cu1": (2, 1, lambda lam: controlled(_phase(lam))),
    "cp": (2, 1, lambda lam: controlled(_phase(lam))),
    "cu3": (2, 3, _cu3_header),
    "cu": (
        2,
        4,
        lambda theta, phi, lam, gamma: controlled(np.exp(1j * gamma) * u3(theta, phi, lam)),
    ),
    "rxx": (2, 1, _rxx),
    "rzz": (2, 1, _rzz),
    "ccx": (3, 0, lambda: controlled(_X, 2)),
    "cswap": (3, 0, lambda: controlled(_SWAP)),
    "rccx": (3, 0, _rccx),
    "c3x": (4, 0, lambda: controlled(_X, 3)),
    "rc3x": (4, 0, _rc3x),
    # The header body of c3sqrtx gives the 3-controlled inverse of sx (checked in the tests).
    "c3sqrtx": (4, 0, lambda: controlled(_SX.conj(), 3)),
    "c4x": (5, 0, lambda: controlled(_X, 4)),
}

#: every gate name the simulator knows.
STANDARD_GATES = frozenset(_GATES)


def signature(name: str) -> tuple[int, int] | None:
    """``(qubits, parameters)`` of a standard gate, None for an unknown name."""
    entry = _GATES.get(name)
    return None if entry is None else (entry[0], entry[1])


@lru_cache(maxsize=4096)
def gate_matrix(name: str, params: tuple[float, ...] = ()) -> Matrix:
    """The matrix of a standard gate (read-only: it is cached and shared)."""
    _, _, build = _GATES[name]
    matrix = np.array(build(*params), dtype=np.complex128)
    matrix.setflags(write=False)
    return matrix
