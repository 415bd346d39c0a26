"""A circuit compiled for the state-vector simulator: validated, split at the points
where the classical record matters, and fused between them.

Final measurements (no later operation touches the qubit, and no later condition reads or
measurement overwrites the bit) are taken out of the operation stream: their outcomes are
read off the final state's probabilities at once. Everything else that is not a gate —
a mid-circuit measurement, a reset, a conditional gate — is a step of its own where the
simulation may split into outcome branches.
"""

from __future__ import annotations

from dataclasses import dataclass

from jobkeeper.backends.sim.fusion import Block, fuse
from jobkeeper.backends.sim.gates import Matrix, gate_matrix, signature
from jobkeeper.circuit.ir import BARRIER, MEASURE, RESET, Circuit, Condition, Operation
from jobkeeper.exceptions import PermanentBackendError

#: gates whose matrix is the identity: they do nothing to the state (on a noisy
#: simulator only their noise acts).
IDENTITY_GATES = frozenset({"id", "u0"})


@dataclass(frozen=True, slots=True)
class Gates:
    blocks: tuple[Block, ...]


@dataclass(frozen=True, slots=True)
class Measure:
    qubit: int
    clbit: int
    condition: Condition | None = None


@dataclass(frozen=True, slots=True)
class Reset:
    qubit: int
    condition: Condition | None = None


@dataclass(frozen=True, slots=True)
class Conditional:
    condition: Condition
    block: Block


Step = Gates | Measure | Reset | Conditional


@dataclass(frozen=True, slots=True)
class Program:
    num_qubits: int
    steps: tuple[Step, ...]
    #: (qubit, clbit) of the final measurements, in ascending clbit order (the order of
    #: the bits of an outcome index, see sampling).
    final: tuple[tuple[int, int], ...]
    #: whether the circuit measures anything at all.
    measures: bool


def check_operation(circuit: Circuit, op: Operation) -> None:
    """PermanentBackendError naming ``op`` when a simulator cannot run it."""
    for q in op.qubits:
        if not 0 <= q < circuit.num_qubits:
            raise PermanentBackendError(f"operation {op.name!r} acts on qubit {q} out of range")
    for c in op.clbits + (op.condition.clbits if op.condition else ()):
        if not 0 <= c < circuit.num_clbits:
            raise PermanentBackendError(
                f"operation {op.name!r} uses classical bit {c} out of range"
            )
    if op.name in (MEASURE, RESET, BARRIER):
        if op.name == MEASURE and (len(op.qubits) != 1 or len(op.clbits) != 1):
            raise PermanentBackendError("measure takes one qubit and one classical bit")
        if op.name == RESET and len(op.qubits) != 1:
            raise PermanentBackendError("reset takes one qubit")
        return
    if op.name in circuit.opaque:
        raise PermanentBackendError(f"opaque gate {op.name!r} cannot be simulated")
    sig = signature(op.name)
    if sig is None:
        raise PermanentBackendError(f"unknown gate {op.name!r} cannot be simulated")
    if sig != (len(op.qubits), len(op.params)):
        raise PermanentBackendError(
            f"gate {op.name!r} takes {sig[0]} qubit(s) and {sig[1]} parameter(s), "
            f"got {len(op.qubits)} and {len(op.params)}"
        )
    if len(set(op.qubits)) != len(op.qubits):
        raise PermanentBackendError(f"gate {op.name!r} repeats a qubit: {op.qubits}")


def final_measurements(ops: tuple[Operation, ...]) -> dict[int, bool]:
    """Index of each measurement that can be read off the final state → whether its bit
    survives (False: a later final measurement overwrites the same bit)."""
    touched: set[int] = set()
    read: set[int] = set()
    written: set[int] = set()
    final: dict[int, bool] = {}
    for index in range(len(ops) - 1, -1, -1):
        op = ops[index]
        if op.name == BARRIER:
            continue
        if op.name == MEASURE and op.condition is None:
            qubit, clbit = op.qubits[0], op.clbits[0]
            if qubit not in touched and clbit not in read:
                final[index] = clbit not in written
            touched.add(qubit)
            written.add(clbit)
            continue
        touched.update(op.qubits)
        written.update(op.clbits)
        if op.condition is not None:
            read.update(op.condition.clbits)
    return final


@dataclass(frozen=True, slots=True)
class Outline:
    """A validated circuit split as every simulator runs it: the operations to simulate
    (no barriers, no final measurements), and the final measurements."""

    body: tuple[Operation, ...]
    #: (qubit, clbit) of the final measurements whose bits survive, in ascending clbit
    #: order (the order of the bits of an outcome index, see sampling).
    final: tuple[tuple[int, int], ...]
    #: whether the circuit measures anything at all.
    measures: bool


def outline(circuit: Circuit) -> Outline:
    """Validate ``circuit`` (PermanentBackendError naming the first operation that cannot
    be simulated) and take out its barriers and final measurements."""
    for op in circuit.operations:
        check_operation(circuit, op)
    final_index = final_measurements(circuit.operations)
    body: list[Operation] = []
    final: list[tuple[int, int]] = []
    for index, op in enumerate(circuit.operations):
        if op.name == BARRIER:
            continue
        if op.name == MEASURE and op.condition is None and index in final_index:
            if final_index[index]:
                final.append((op.qubits[0], op.clbits[0]))
            continue
        body.append(op)
    final.sort(key=lambda pair: pair[1])
    measures = any(op.name == MEASURE for op in circuit.operations)
    return Outline(tuple(body), tuple(final), measures)


def compile_circuit(circuit: Circuit, max_width: int) -> Program:
    """Validate ``circuit`` and turn it into simulation steps (raises
    PermanentBackendError naming the first operation that cannot be simulated)."""
    plan = outline(circuit)
    steps: list[Step] = []
    pending: list[tuple[tuple[int, ...], Matrix]] = []

    def flush() -> None:
        if pending:
            steps.append(Gates(tuple(fuse(pending, max_width))))
            pending.clear()

    for op in plan.body:
        if op.name in (MEASURE, RESET) or op.condition is not None:
            flush()
            if op.name == MEASURE:
                step: Step = Measure(op.qubits[0], op.clbits[0], op.condition)
            elif op.name == RESET:
                step = Reset(op.qubits[0], op.condition)
            elif op.condition is not None and op.name not in IDENTITY_GATES:
                (block,) = fuse([(op.qubits, gate_matrix(op.name, op.params))], max_width)
                step = Conditional(op.condition, block)
            else:
                continue
            steps.append(step)
            continue
        if op.name not in IDENTITY_GATES:
            pending.append((op.qubits, gate_matrix(op.name, op.params)))
    flush()
    return Program(circuit.num_qubits, tuple(steps), plan.final, plan.measures)
