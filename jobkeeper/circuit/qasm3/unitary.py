"""Single-qubit unitaries as numbers: the matrices behind ``U``, real powers and the
multi-controlled decomposition. Used only where a gate modifier has no named standard
gate to map to (a real ``pow``, or more controls than the standard set has gates for).

Conventions, from the specification (../shared/corpus/qasm3/spec/gates.rst, "Built-in
gates"): OpenQASM 3's ``U(θ,φ,λ)`` is ``e^{iθ/2}·u3(θ,φ,λ)`` where ``u3`` is the usual
matrix [[cos θ/2, -e^{iλ} sin θ/2], [e^{iφ} sin θ/2, e^{i(φ+λ)} cos θ/2]] that the
simulators use for the IR's ``u3``. A single-qubit gate is carried as ``(θ, φ, λ, α)``:
the matrix ``e^{iα}·u3(θ,φ,λ)``.
"""

from __future__ import annotations

import cmath
import math

import numpy as np
import numpy.typing as npt

Matrix = npt.NDArray[np.complex128]
Angles = tuple[float, float, float, float]

_EPS = 1e-12


def u3_matrix(theta: float, phi: float, lam: float, alpha: float = 0.0) -> Matrix:
    c, s = math.cos(theta / 2), math.sin(theta / 2)
    g = cmath.exp(1j * alpha)
    return np.array(
        [
            [g * c, -g * cmath.exp(1j * lam) * s],
            [g * cmath.exp(1j * phi) * s, g * cmath.exp(1j * (phi + lam)) * c],
        ],
        dtype=np.complex128,
    )


def _wrap(angle: float) -> float:
    """The angle in (-π, π]."""
    wrapped = math.remainder(angle, 2 * math.pi)
    return math.pi if wrapped <= -math.pi + 1e-13 else wrapped


def angles_of(matrix: Matrix) -> Angles:
    """``(θ, φ, λ, α)`` with ``matrix = e^{iα}·u3(θ,φ,λ)``, angles in (-π, π] (θ in [0, π])."""
    a, b = abs(matrix[0, 0]), abs(matrix[1, 0])
    theta = 2 * math.atan2(b, a)
    if a > _EPS:
        alpha = cmath.phase(matrix[0, 0])
        if b > _EPS:
            phi = cmath.phase(matrix[1, 0]) - alpha
            lam = cmath.phase(-matrix[0, 1]) - alpha
        else:
            phi, lam = 0.0, cmath.phase(matrix[1, 1]) - alpha
    else:
        phi = 0.0
        alpha = cmath.phase(matrix[1, 0])
        lam = cmath.phase(-matrix[0, 1]) - alpha
    return theta, _wrap(phi), _wrap(lam), _wrap(alpha)


def principal_power(matrix: Matrix, k: float) -> Matrix:
    """``matrix**k`` by the principal branch: each eigenvalue e^{iφ} with φ in (-π, π]
    becomes e^{ikφ} (the specification's rule for ``pow(k) @`` with real k, gates.rst)."""
    values, vectors = np.linalg.eig(matrix)
    powered = [cmath.exp(1j * k * _principal_arg(v)) for v in values]
    if abs(values[0] - values[1]) < 1e-9:
        # Equal eigenvalues: a unitary with one eigenvalue is that multiple of I.
        return np.asarray(powered[0] * np.eye(2), dtype=np.complex128)
    result = vectors @ np.diag(powered) @ np.linalg.inv(vectors)
    return np.asarray(result, dtype=np.complex128)


def _principal_arg(value: complex) -> float:
    arg = cmath.phase(value)
    return math.pi if arg <= -math.pi + 1e-9 else arg
