"""Where resolved gates go (:mod:`.modifiers`): IR operations, or the 2×2 matrix of a
single-qubit gate when a real ``pow`` needs it.

The IR forms: an uncontrolled ``U`` is ``u3`` (its global phase has no effect on any
outcome and is dropped), one control makes ``cu``, whose fourth parameter carries the
phase; ``gphase`` with one or two controls is ``p``/``cp`` on the controls; more controls
use the decomposition of Barenco et al., "Elementary gates for quantum computation",
Phys. Rev. A 52, 3457 (1995), lemma 7.5. Negative controls are wrapped in ``x``.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import NoReturn

import numpy as np

from jobkeeper.circuit.canonical import round_param
from jobkeeper.circuit.ir import BARRIER, Operation
from jobkeeper.circuit.qasm3.unitary import Matrix, angles_of, principal_power, u3_matrix

Controls = tuple[tuple[int, bool], ...]
#: Multi-controlled X gates of the standard set, by number of controls.
MCX = {1: "cx", 2: "ccx", 3: "c3x", 4: "c4x"}
_X = u3_matrix(math.pi, 0.0, math.pi)
#: Work units of one numerical step (a matrix root and its angles): tens of microseconds,
#: a hundred times the cost of emitting an operation.
NUMERIC_COST = 400


class Sink:
    """Where resolved gates go: IR operations, or (for a real power) a 2×2 matrix."""

    matrix_only = False

    def named(self, name: str, params: tuple[float, ...], qubits: tuple[int, ...]) -> None:
        raise NotImplementedError

    def u(self, angles: tuple[float, float, float, float], qubit: int, ctrls: Controls) -> None:
        raise NotImplementedError

    def gphase(self, alpha: float, ctrls: Controls) -> None:
        raise NotImplementedError

    def barrier(self, qubits: tuple[int, ...]) -> None:
        raise NotImplementedError


class OperationSink(Sink):
    def __init__(self, out: list[Operation], charge: Callable[[int], None]) -> None:
        self.out = out
        self.charge = charge

    def named(self, name: str, params: tuple[float, ...], qubits: tuple[int, ...]) -> None:
        self.charge(1 + len(qubits) + len(params))
        self.out.append(Operation(name, qubits, tuple(round_param(p) for p in params)))

    def barrier(self, qubits: tuple[int, ...]) -> None:
        self.charge(1 + len(qubits))
        self.out.append(Operation(BARRIER, tuple(sorted(set(qubits)))))

    def _flip(self, ctrls: Controls) -> None:
        for q, positive in ctrls:
            if not positive:
                self.named("x", (), (q,))

    def u(self, angles: tuple[float, float, float, float], qubit: int, ctrls: Controls) -> None:
        self._flip(ctrls)
        theta, phi, lam, _ = angles
        if not ctrls:
            self.named("u3", (theta, phi, lam), (qubit,))
        elif len(ctrls) == 1:
            self.named("cu", angles, (ctrls[0][0], qubit))
        else:
            self.multi_controlled(u3_matrix(*angles), [q for q, _ in ctrls], qubit)
        self._flip(ctrls)

    def gphase(self, alpha: float, ctrls: Controls) -> None:
        if not ctrls:
            return  # a global phase has no effect on any outcome
        self._flip(ctrls)
        qubits = [q for q, _ in ctrls]
        if len(qubits) == 1:
            self.named("p", (alpha,), (qubits[0],))
        elif len(qubits) == 2:
            self.named("cp", (alpha,), (qubits[0], qubits[1]))
        else:
            phase = np.diag([1.0, np.exp(1j * alpha)]).astype(np.complex128)
            self.multi_controlled(phase, qubits[:-1], qubits[-1])
        self._flip(ctrls)

    def multi_controlled(self, matrix: Matrix, controls: list[int], target: int) -> None:
        """Barenco et al. 1995, lemma 7.5: C^n(W) = C(V)·C^{n-1}X·C(V†)·C^{n-1}X·C^{n-1}(V)
        with V² = W, the last control carrying the single-controlled steps."""
        if len(controls) == 1:
            self.named("cu", angles_of(matrix), (controls[0], target))
            return
        self.charge(NUMERIC_COST)
        root = principal_power(matrix, 0.5)
        last, rest = controls[-1], controls[:-1]
        self.named("cu", angles_of(root), (last, target))
        self.multi_x(rest, last)
        self.named("cu", angles_of(root.conj().T), (last, target))
        self.multi_x(rest, last)
        self.multi_controlled(root, rest, target)

    def multi_x(self, controls: list[int], target: int) -> None:
        if len(controls) in MCX:
            self.named(MCX[len(controls)], (), (*controls, target))
        else:
            self.multi_controlled(_X, controls, target)


class MatrixSink(Sink):
    """Accumulates the 2×2 matrix of a single-qubit gate (qubit 0)."""

    matrix_only = True

    def __init__(self, fail: Callable[[str], NoReturn]) -> None:
        self.matrix = np.eye(2, dtype=np.complex128)
        self.fail = fail

    def u(self, angles: tuple[float, float, float, float], qubit: int, ctrls: Controls) -> None:
        if ctrls:
            self.fail("pow with a non-integer exponent is supported on single-qubit gates only")
        self.matrix = u3_matrix(*angles) @ self.matrix

    def gphase(self, alpha: float, ctrls: Controls) -> None:
        phase = complex(np.exp(1j * alpha))
        if not ctrls:
            self.matrix = phase * self.matrix
        elif len(ctrls) == 1:
            diag = [1.0, phase] if ctrls[0][1] else [phase, 1.0]
            self.matrix = np.diag(diag).astype(np.complex128) @ self.matrix
        else:
            self.fail("pow with a non-integer exponent is supported on single-qubit gates only")

    def barrier(self, qubits: tuple[int, ...]) -> None:
        pass
