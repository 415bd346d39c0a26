"""A circuit compiled for the density-matrix simulator: every operation with its noise as
superoperator terms on the vectorised ρ, fused into small blocks between the points where
the classical record matters.

The structure is the state-vector program's (:mod:`.program`): the same validation, the
same rule for which measurements are final (read off the final diagonal at once), and a
step of its own for each mid-circuit measurement, reset and conditional operation. What
differs is what a gate becomes: on ρ stored as a vector of 4^n amplitudes (row qubit q =
vector qubit n + q, column qubit q = vector qubit q), a gate U is U on the row qubits and
conj(U) on the column qubits, followed by its noise channels (:mod:`.noise`). The
fuser (:mod:`.fusion`) only multiplies matrices, so it merges these terms as it merges
gates; blocks stay within ``max_width`` vector qubits (4 by default: one two-qubit gate
with its noise is one 16 × 16 block, one pass over ρ).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from jobkeeper.backends.sim import noise as noise_channels
from jobkeeper.backends.sim.fusion import Block, fuse
from jobkeeper.backends.sim.gates import Matrix, gate_matrix, u3
from jobkeeper.backends.sim.noise import NoiseModel

# The validation and the final-measurement rule are the state-vector program's own, so
# the two simulators accept the same circuits and read the same measurements at the end.
from jobkeeper.backends.sim.program import IDENTITY_GATES, Measure, Reset, outline
from jobkeeper.circuit.ir import MEASURE, RESET, Circuit, Condition, Operation
from jobkeeper.circuit.stdgates import expand_standard

#: widest fused block in vector qubits (a two-qubit gate and its noise: 16 × 16).
DEFAULT_MAX_WIDTH = 4
#: widest fused block of a noiseless run, in physical qubits (the state-vector default).
UNITARY_WIDTH = 3

Term = tuple[tuple[int, ...], Matrix]


@dataclass(frozen=True, slots=True)
class Channel:
    """Fused blocks, applied to every record (or only to those where ``condition``
    holds). With ``unitary`` false the blocks are superoperators on vector qubits; with
    ``unitary`` true they are gates U on physical qubits, applied as U ρ U† =
    U·(U·ρ)† (ρ is Hermitian): twice on the row qubits with a conjugate transpose
    between, because the row qubits are the high bits of ρ's index, where the kernels
    move whole contiguous rows, while the column qubits are the low bits, where every
    pass gathers strided entries."""

    blocks: tuple[Block, ...]
    condition: Condition | None = None
    unitary: bool = False


Step = Channel | Measure | Reset


@dataclass(frozen=True, slots=True)
class DensityProgram:
    num_qubits: int
    steps: tuple[Step, ...]
    #: (qubit, clbit) of the final measurements, in ascending clbit order (see
    #: program.Outline).
    final: tuple[tuple[int, int], ...]
    #: whether the circuit measures anything at all.
    measures: bool
    #: operations run, by arity (a gate on ≥ 3 qubits under gate noise counts as the
    #: primitives it runs as).
    operations: tuple[int, int, int]


def primitives(name: str, params: tuple[float, ...], qubits: tuple[int, ...]) -> list[Term]:
    """A gate on ≥ 3 qubits as its published definition: ``U`` and ``CX`` matrices on
    the qubits they act on (equal to the gate up to a global phase)."""
    out: list[Term] = []
    for prim, positions, values in expand_standard(name, params):
        mapped = tuple(qubits[i] for i in positions)
        matrix = gate_matrix("cx") if prim == "CX" else u3(*values)
        out.append((mapped, matrix))
    return out


def gate_terms(
    n: int,
    qubits: tuple[int, ...],
    matrix: Matrix | None,
    noise: NoiseModel,
    duration: float | None = None,
) -> list[Term]:
    """The superoperator terms of one gate (``matrix`` None: the identity) on ``qubits``
    of an n-qubit register, followed by its noise, in the order they act; relaxation
    over ``duration`` seconds (default: the gate time of its arity)."""
    rows = tuple(n + q for q in qubits)
    terms: list[Term] = []
    if matrix is not None:
        terms.append((rows, matrix))
        terms.append((qubits, np.asarray(matrix.conj(), dtype=np.complex128)))
    arity = len(qubits)
    if arity > 2:
        return terms
    p = noise.depolarizing_1q if arity == 1 else noise.depolarizing_2q
    if p > 0:
        terms.append((rows + qubits, noise_channels.depolarizing(p, arity)))
    if noise.relaxation:
        if duration is None:
            duration = noise.gate_time(arity)
        for q in qubits:
            gamma, flip = noise.decay(q, duration)
            if gamma > 0 or flip > 0:
                terms.append(((n + q, q), noise_channels.relaxation(gamma, flip)))
    return terms


def operation_terms(n: int, op: Operation, noise: NoiseModel, counts: list[int]) -> list[Term]:
    """The terms of a gate operation with its noise; ``counts`` (by arity − 1, capped at
    3) gains the operations run."""
    if len(op.qubits) >= 3 and noise.gate_noise:
        terms: list[Term] = []
        for qubits, matrix in primitives(op.name, op.params, op.qubits):
            counts[len(qubits) - 1] += 1
            terms += gate_terms(n, qubits, matrix, noise)
        return terms
    counts[min(len(op.qubits), 3) - 1] += 1
    identity = op.name in IDENTITY_GATES
    unitary = None if identity else gate_matrix(op.name, op.params)
    duration = noise.gate_time("id") if identity else None
    return gate_terms(n, op.qubits, unitary, noise, duration)


def readout_terms(n: int, qubit: int, noise: NoiseModel) -> list[Term]:
    """Relaxation of ``qubit`` over the readout time (nothing without one)."""
    duration = noise.gate_time("readout")
    if not noise.relaxation or duration <= 0:
        return []
    gamma, flip = noise.decay(qubit, duration)
    if gamma <= 0 and flip <= 0:
        return []
    return [((n + qubit, qubit), noise_channels.relaxation(gamma, flip))]


def compile_density(circuit: Circuit, noise: NoiseModel, max_width: int) -> DensityProgram:
    """Validate ``circuit`` (PermanentBackendError naming the first operation that cannot
    be simulated) and turn it into steps on the vectorised ρ."""
    plan = outline(circuit)
    n = circuit.num_qubits
    steps: list[Step] = []
    pending: list[Term] = []
    pending_condition: list[Condition | None] = [None]
    counts = [0, 0, 0]
    # Without gate noise every gate is unitary: fused on the physical qubits (as the
    # state-vector program fuses them) and applied as U ρ U† (see ``Channel``).
    unitary = not noise.gate_noise

    def flush() -> None:
        if pending:
            width = UNITARY_WIDTH if unitary else max_width
            blocks = tuple(fuse(pending, width))
            steps.append(Channel(blocks, pending_condition[0], unitary=unitary))
            pending.clear()

    for op in plan.body:
        if op.name in (MEASURE, RESET):
            decay = readout_terms(n, op.qubits[0], noise)
            if decay:
                # The qubit relaxes while it is read, under the measurement's condition.
                if op.condition != pending_condition[0]:
                    flush()
                    pending_condition[0] = op.condition
                pending += decay
            flush()
            if op.name == MEASURE:
                steps.append(Measure(op.qubits[0], op.clbits[0], op.condition))
            else:
                steps.append(Reset(op.qubits[0], op.condition))
        else:
            # A run of gates under the same condition (or none) is one step: ``if`` gates
            # come in runs (a correction is several gates), and one step fuses them.
            if op.condition != pending_condition[0]:
                flush()
                pending_condition[0] = op.condition
            if unitary:
                counts[min(len(op.qubits), 3) - 1] += 1
                if op.name not in IDENTITY_GATES:
                    pending.append((op.qubits, gate_matrix(op.name, op.params)))
            else:
                pending += operation_terms(n, op, noise, counts)
    if plan.final and noise.relaxation and noise.gate_time("readout") > 0:
        if pending_condition[0] is not None:
            flush()
            pending_condition[0] = None
        for qubit, _ in sorted(plan.final):
            pending += readout_terms(n, qubit, noise)
    flush()
    return DensityProgram(
        n, tuple(steps), plan.final, plan.measures, (counts[0], counts[1], counts[2])
    )
