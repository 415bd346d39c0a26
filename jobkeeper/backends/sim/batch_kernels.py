"""State-vector kernels over many points at once: the states of N bound points of one
circuit shape as two float64 arrays (real and imaginary parts), shape (N, 2^n), amplitude
index bit q = qubit q.

Why real arithmetic: a point's amplitudes must come out bit for bit the same whatever
batch it runs in, at whatever position. numpy's float64 ``multiply``, ``add`` and
``subtract`` are single correctly rounded IEEE 754 operations per element, so SIMD width,
alignment, array length and position cannot change a result. Its complex128 multiply is
not such an operation: its SIMD loops fuse multiply and add (measured here: 44% of
100,003 products differ in the last bit from the same product written as four
multiplications and two additions), so complex arithmetic is spelled out here. Nothing
sums across points, and sums within a point run in a fixed order.

Gate matrices are built per point with Python's ``math`` functions (one correctly
rounded libm call per value, independent of the batch), never with numpy's vectorised
trigonometry, whose SIMD and scalar paths need not agree.

A gate on k qubits applies its 2^k × 2^k matrix: out_r = Σ_j M[r, j] · s_j, each complex
product as (Re M·Re s − Im M·Im s, Re M·Im s + Im M·Re s), the terms added in order of
j. An entry that is zero for every parameter (a structural zero, known from the gate's
name alone) is skipped; one that is the constant 1 or −1 adds ±s_j.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from functools import cache

import numpy as np
import numpy.typing as npt

from jobkeeper.backends.sim.gates import gate_matrix

Floats = npt.NDArray[np.float64]
#: one entry of a gate matrix over the points: None (a structural zero), a constant, or
#: one value per point.
Entry = None | float | Floats
#: a gate's matrix as (real part, imaginary part) rows of entries.
Parts = tuple[list[list[Entry]], list[list[Entry]]]

_PROBES = ((0.37, 1.13, 2.71, 0.59), (2.03, 0.41, 1.77, 1.31))


@cache
def _structure(name: str, n_params: int) -> tuple[tuple[tuple[bool, bool], ...], ...]:
    """Per entry (real part nonzero, imaginary part nonzero) for some parameter: the
    union over two generic parameter sets (a zero at both is a structural zero)."""
    mats = [np.asarray(gate_matrix(name, probe[:n_params])) for probe in _PROBES]
    d = mats[0].shape[0]
    return tuple(
        tuple(
            (
                any(m[r, c].real != 0 for m in mats),
                any(m[r, c].imag != 0 for m in mats),
            )
            for c in range(d)
        )
        for r in range(d)
    )


def _constant(value: float) -> Entry:
    return value


def _halves(values: Floats) -> tuple[Floats, Floats]:
    """cos(v/2) and sin(v/2) per point, by libm."""
    halves = (values * 0.5).tolist()
    return (
        np.fromiter(map(math.cos, halves), np.float64, len(halves)),
        np.fromiter(map(math.sin, halves), np.float64, len(halves)),
    )


def _phases(values: Floats) -> tuple[Floats, Floats]:
    """cos(v) and sin(v) per point, by libm."""
    listed = values.tolist()
    return (
        np.fromiter(map(math.cos, listed), np.float64, len(listed)),
        np.fromiter(map(math.sin, listed), np.float64, len(listed)),
    )


def _rx(p: Floats) -> Parts:
    c, s = _halves(p[:, 0])
    return [[c, None], [None, c]], [[None, -s], [-s, None]]


def _ry(p: Floats) -> Parts:
    c, s = _halves(p[:, 0])
    return [[c, -s], [s, c]], [[None, None], [None, None]]


def _rz(p: Floats) -> Parts:
    c, s = _halves(p[:, 0])
    return [[c, None], [None, c]], [[-s, None], [None, s]]


def _phase(p: Floats) -> Parts:
    c, s = _phases(p[:, 0])
    return [[1.0, None], [None, c]], [[None, None], [None, s]]


def _u3(p: Floats) -> Parts:
    # U(θ,φ,λ) = [[c, −e^{iλ}s], [e^{iφ}s, e^{i(φ+λ)}c]] (OpenQASM 2.0 spec, section 3).
    c, s = _halves(p[:, 0])
    cphi, sphi = _phases(p[:, 1])
    clam, slam = _phases(p[:, 2])
    csum, ssum = _phases(p[:, 1] + p[:, 2])
    return (
        [[c, -(clam * s)], [cphi * s, csum * c]],
        [[None, -(slam * s)], [sphi * s, ssum * c]],
    )


def _controlled(build: Callable[[Floats], Parts]) -> Callable[[Floats], Parts]:
    """The 4 × 4 matrix of a gate with one control (listed first): identity, then the
    gate when the control is 1."""

    def built(p: Floats) -> Parts:
        re, im = build(p)
        out_re: list[list[Entry]] = [[1.0, None, None, None], [None, 1.0, None, None]]
        out_im: list[list[Entry]] = [[None] * 4, [None] * 4]
        for r in range(2):
            out_re.append([None, None, *re[r]])
            out_im.append([None, None, *im[r]])
        return out_re, out_im

    return built


#: gates whose matrices are built here for all points at once; any other parametrised
#: gate takes :func:`gate_matrix` per point.
_BUILDERS: dict[str, Callable[[Floats], Parts]] = {
    "rx": _rx,
    "ry": _ry,
    "rz": _rz,
    "p": _phase,
    "u1": _phase,
    "u3": _u3,
    "u": _u3,
    "cp": _controlled(_phase),
    "cu1": _controlled(_phase),
    "crx": _controlled(_rx),
    "cry": _controlled(_ry),
    "crz": _controlled(_rz),
}


def gate_parts(name: str, params: Floats) -> Parts:
    """The matrices of gate ``name`` for each row of ``params`` (points × parameters)."""
    if params.shape[1] == 0:
        matrix = np.asarray(gate_matrix(name))
        d = matrix.shape[0]
        return (
            [[_entry(float(matrix[r, c].real)) for c in range(d)] for r in range(d)],
            [[_entry(float(matrix[r, c].imag)) for c in range(d)] for r in range(d)],
        )
    builder = _BUILDERS.get(name)
    if builder is not None:
        return builder(params)
    stacked = np.stack([gate_matrix(name, tuple(row)) for row in params.tolist()])
    structure = _structure(name, params.shape[1])
    d = stacked.shape[1]
    real = np.ascontiguousarray(stacked.real)
    imag = np.ascontiguousarray(stacked.imag)
    return (
        [
            [real[:, r, c].copy() if structure[r][c][0] else None for c in range(d)]
            for r in range(d)
        ],
        [
            [imag[:, r, c].copy() if structure[r][c][1] else None for c in range(d)]
            for r in range(d)
        ],
    )


def _entry(value: float) -> Entry:
    return None if value == 0 else value


class States:
    """The states of ``count`` points of ``n`` qubits, all starting in |0…0⟩."""

    def __init__(self, count: int, n: int):
        self.n = n
        self.count = count
        self.re = np.zeros((count, 1 << n), dtype=np.float64)
        self.im = np.zeros((count, 1 << n), dtype=np.float64)
        self.re[:, 0] = 1.0

    def apply(self, qubits: Sequence[int], parts: Parts) -> None:
        """Apply a gate on ``qubits`` (first listed most significant) with per-point
        matrices ``parts`` (see the module docstring for the order of operations)."""
        n, k = self.n, len(qubits)
        shape = (self.count,) + (2,) * n
        views = (self.re.reshape(shape), self.im.reshape(shape))
        picks = []
        for j in range(1 << k):
            index: list[slice | int] = [slice(None)] * (n + 1)
            for i, q in enumerate(qubits):
                index[1 + n - 1 - q] = (j >> (k - 1 - i)) & 1
            picks.append(tuple(index))
        s_re = [views[0][pick] for pick in picks]
        s_im = [views[1][pick] for pick in picks]
        lead = (self.count,) + (1,) * (n - k)
        m_re, m_im = parts
        out = []
        for r in range(1 << k):
            acc_re: Floats | None = None
            acc_im: Floats | None = None
            for j in range(1 << k):
                a, b = _shaped(m_re[r][j], lead), _shaped(m_im[r][j], lead)
                # Re: a·Re s − b·Im s; Im: a·Im s + b·Re s (terms skipped where zero).
                acc_re = _add(acc_re, _times(a, s_re[j]), 1)
                acc_re = _add(acc_re, _times(b, s_im[j]), -1)
                acc_im = _add(acc_im, _times(a, s_im[j]), 1)
                acc_im = _add(acc_im, _times(b, s_re[j]), 1)
            out.append((acc_re, acc_im))
        for pick, (acc_re, acc_im) in zip(picks, out, strict=True):
            views[0][pick] = 0.0 if acc_re is None else acc_re
            views[1][pick] = 0.0 if acc_im is None else acc_im

    def probabilities(self, final: Sequence[int]) -> Floats:
        """(points × 2^m) probabilities of the readings of qubits ``final``: index bit j
        is the reading of ``final[j]``; unread qubits summed out one at a time, in
        ascending order of qubit, each as one addition of two halves."""
        n = self.n
        populations = self.re * self.re + self.im * self.im
        if list(final) == list(range(n)):
            return populations
        probs = populations.reshape((self.count,) + (2,) * n)
        axes = [n - 1 - q for q in range(n)]  # axis (after the point axis) of qubit q
        for q in range(n):
            if q in final:
                continue
            axis = 1 + axes[q]
            probs = np.take(probs, 0, axis=axis) + np.take(probs, 1, axis=axis)
            axes = [a - 1 if a > axes[q] else a for a in axes]
        order = [0] + [1 + axes[q] for q in reversed(final)]
        return np.ascontiguousarray(np.transpose(probs, order)).reshape(self.count, -1)


def _shaped(entry: Entry, lead: tuple[int, ...]) -> Entry:
    if isinstance(entry, np.ndarray):
        return entry.reshape(lead)
    return entry


def _times(entry: Entry, s: Floats) -> Floats | None:
    if entry is None:
        return None
    if isinstance(entry, float):
        if entry == 1.0:
            return s
        if entry == -1.0:
            return np.negative(s)
    return np.multiply(entry, s)


def _add(acc: Floats | None, term: Floats | None, sign: int) -> Floats | None:
    if term is None:
        return acc
    if acc is None:
        return np.negative(term) if sign < 0 else np.array(term)
    return np.subtract(acc, term) if sign < 0 else np.add(acc, term)
