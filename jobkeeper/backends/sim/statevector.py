"""The exact state-vector simulator: a local backend with seeded sampling.

How a task runs:

1. The circuit is compiled (:mod:`.program`): validated (an opaque or unknown gate is
   refused with its name), final measurements taken out, gates fused into small dense
   blocks (:mod:`.fusion`).
2. Memory is checked before anything is allocated: 2^n amplitudes × 16 bytes for the
   state plus 16 bytes each for the outcome probabilities must fit the smaller of the
   configured ``max_memory_bytes`` and the memory the system has available.
3. The state evolves in place (:mod:`.kernels`). A mid-circuit measurement or a reset
   splits the run into outcome branches (each simulated once, with its probability and
   classical record); an ``if`` is decided per branch from its record. Branches whose
   probability is below 1e-12 are not followed. Branches that end with the same
   classical record are merged into one weighted outcome distribution (exact: the mix
   of their distributions). More than ``max_branches`` branches is refused.
4. The final state's probabilities give the exact outcome distribution; counts are drawn
   from it as documented in :mod:`.sampling`. A circuit that measures nothing reports
   every shot as the all-zero classical bit string (``metadata["measured"]`` is False):
   classical bits start at zero and nothing wrote them.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from pydantic import Field, StrictInt

from jobkeeper.backend import BatchPoint, Result
from jobkeeper.backends.sim import kernels
from jobkeeper.backends.sim.base import (
    BRANCH_FLOOR,
    Simulator,
    SimulatorOptions,
    holds,
    parse_options,
)
from jobkeeper.backends.sim.batch import run_statevector_batch
from jobkeeper.backends.sim.fusion import DEFAULT_MAX_WIDTH, Block
from jobkeeper.backends.sim.program import (
    Conditional,
    Gates,
    Measure,
    Program,
    Reset,
    compile_circuit,
)
from jobkeeper.backends.sim.sampling import Floats, marginal
from jobkeeper.circuit.ir import Circuit
from jobkeeper.circuit.qasm3.template import Template
from jobkeeper.exceptions import PermanentBackendError

DEFAULT_MAX_QUBITS = 28
#: bytes per amplitude: the complex128 state, the float64 outcome probabilities, and a
#: reordered copy of them when the measured bits are not in qubit order.
BYTES_PER_AMPLITUDE = 32


class StatevectorOptions(SimulatorOptions):
    adapter: str = "statevector"
    max_qubits: StrictInt = Field(default=DEFAULT_MAX_QUBITS, ge=1)
    fusion_width: StrictInt = Field(default=DEFAULT_MAX_WIDTH, ge=1)


class StatevectorBackend(Simulator[Program]):
    """Exact simulation of OpenQASM 2.0 circuits on this machine (picklable)."""

    method = "statevector"
    kernel_version = "1"
    version_tag = "sv"
    description = "exact state-vector simulator (numpy) with seeded sampling"
    #: up to 8 qubits (256 amplitudes) a run takes well under a millisecond per hundred
    #: operations: the worker runs such jobs inline (see LocalBackend).
    inline_qubits = 8

    def __init__(self, name: str = "statevector", config: Mapping[str, Any] | None = None):
        config = dict(config or {"adapter": "statevector"})
        options = parse_options(StatevectorOptions, f"statevector backend {name!r}", config)
        self._set_limits(name, config, options)

    def qubits_that_fit(self, limit: int) -> int:
        return max(0, (limit // BYTES_PER_AMPLITUDE).bit_length() - 1)

    def footprint(self, num_qubits: int, states: int) -> tuple[int, str]:
        needed = (1 << num_qubits) * (16 * states + BYTES_PER_AMPLITUDE - 16)
        what = "a state vector" if states == 1 else f"{states} branch state vectors"
        return needed, (
            f"{what}: 2^{num_qubits} amplitudes × 16 bytes each, plus 16 bytes each for "
            "the outcome probabilities"
        )

    def compile(self, circuit: Circuit) -> Program:
        program = compile_circuit(circuit, self.fusion_width)
        self.check_memory(circuit.num_qubits)
        return program

    def final_state(self, circuit: Circuit) -> kernels.State:
        """The state vector at the end of a circuit that neither measures, resets nor
        branches before its final measurements (which are ignored). Amplitude index bit
        q is qubit q (qubit 0 least significant)."""
        program = self.compile(circuit)
        if any(not isinstance(step, Gates) for step in program.steps):
            raise PermanentBackendError(
                "the circuit measures, resets or branches mid-way: it has no single final state"
            )
        state = initial_state(circuit.num_qubits)
        for step in program.steps:
            assert isinstance(step, Gates)
            for block in step.blocks:
                kernels.apply(state, circuit.num_qubits, block.matrix, block.qubits, block.kind)
        return state

    def run_batch(self, template: Template, points: Sequence[BatchPoint]) -> list[Result]:
        """The points evolved together where the circuit is small (:mod:`.batch`)."""
        return run_statevector_batch(self, template, points)

    def outcome_weights(self, program: Program) -> tuple[dict[int, Floats], dict[str, Any]]:
        """Exact outcome weights per classical record (before the final measurements),
        each as a vector over the final measurements' outcomes; and the branch count."""
        n = program.num_qubits
        final_qubits = [q for q, _ in program.final]
        records: dict[int, Floats] = {}
        # Depth first, and no other reference to a state: a finished branch's memory is
        # free before the next one starts (the memory check counts the stack).
        stack: list[tuple[int, kernels.State, float, int]] = [(0, initial_state(n), 1.0, 0)]
        branches = 1
        while stack:
            index, state, weight, record = stack.pop()
            while index < len(program.steps):
                step = program.steps[index]
                index += 1
                if isinstance(step, Gates):
                    for block in step.blocks:
                        _apply(state, n, block)
                    continue
                if step.condition is not None and not holds(step.condition, record):
                    continue
                if isinstance(step, Conditional):
                    block = step.block
                    kernels.apply(state, n, block.matrix, block.qubits, block.kind)
                    continue
                p1 = min(1.0, max(0.0, kernels.probability_of_one(state, n, step.qubit)))
                outcomes = [b for b, p in ((0, 1.0 - p1), (1, p1)) if p > BRANCH_FLOOR]
                if len(outcomes) == 2:
                    branches += 1
                    if branches > self.max_branches:
                        raise self.too_many_branches(
                            "outcome branches (mid-circuit measurements and resets)"
                        )
                    self.check_memory(n, states=len(stack) + 2)
                    other = state.copy()
                    _collapse(other, n, step, 1, p1)
                    stack.append((index, other, weight * p1, _write(step, record, 1)))
                outcome = outcomes[0]
                p = p1 if outcome else 1.0 - p1
                _collapse(state, n, step, outcome, p)
                weight *= p
                record = _write(step, record, outcome)
            probs = marginal(state, n, final_qubits)
            probs *= weight
            del state
            if record in records:
                records[record] += probs
            else:
                records[record] = probs
        return records, {"branches": branches}


def _apply(state: kernels.State, n: int, block: Block) -> None:
    if len(block.qubits) == n and block.qubits == _descending(n):
        # A block on every qubit, highest first: its index is the state's index, so it is
        # one matrix-vector product (small circuits fuse into exactly this).
        state[...] = block.matrix @ state
    else:
        kernels.apply(state, n, block.matrix, block.qubits, block.kind)


@functools.cache
def _descending(n: int) -> tuple[int, ...]:
    return tuple(range(n - 1, -1, -1))


def initial_state(num_qubits: int) -> kernels.State:
    """|0…0⟩ on ``num_qubits`` qubits."""
    state = np.zeros(1 << num_qubits, dtype=np.complex128)
    state[0] = 1.0
    return state


def _write(step: Measure | Reset, record: int, outcome: int) -> int:
    if isinstance(step, Reset):
        return record
    return record | (1 << step.clbit) if outcome else record & ~(1 << step.clbit)


def _collapse(state: kernels.State, n: int, step: Measure | Reset, outcome: int, p: float) -> None:
    """Project ``step.qubit`` on ``outcome`` (probability ``p``) and renormalise; a reset
    then moves the amplitudes to the qubit's 0 half."""
    zero, one = kernels.qubit_slices(state, n, step.qubit)
    scale = 1.0 / np.sqrt(p)
    kept, dropped = (one, zero) if outcome else (zero, one)
    if isinstance(step, Reset) and outcome:
        np.multiply(one, scale, out=zero)
        one[...] = 0
        return
    kept *= scale
    dropped[...] = 0


def from_config(name: str, config: Mapping[str, Any]) -> StatevectorBackend:
    """The registry's factory: ``config`` keys ``adapter``, ``max_qubits`` (default 28),
    ``max_memory_bytes``, ``max_branches`` (default 1024), ``fusion_width`` (default 5)."""
    return StatevectorBackend(name, config)
