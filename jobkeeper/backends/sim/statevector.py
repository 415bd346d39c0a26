"""The exact state-vector simulator: a local backend with seeded sampling.

How a task runs:

1. The circuit is compiled (:mod:`._program`): validated (an opaque or unknown gate is
   refused with its name), final measurements taken out, gates fused into small dense
   blocks (:mod:`._fusion`).
2. Memory is checked before anything is allocated: 2^n amplitudes × 16 bytes for the
   state plus 16 bytes each for the outcome probabilities must fit the smaller of the
   configured ``max_memory_bytes`` and the memory the system has available.
3. The state evolves in place (:mod:`._kernels`). A mid-circuit measurement or a reset
   splits the run into outcome branches (each simulated once, with its probability and
   classical record); an ``if`` is decided per branch from its record. Branches whose
   probability is below 1e-12 are not followed. Branches that end with the same
   classical record are merged into one weighted outcome distribution (exact: the mix
   of their distributions). More than ``max_branches`` branches is refused.
4. The final state's probabilities give the exact outcome distribution; counts are drawn
   from it as documented in :mod:`._sampling`. A circuit that measures nothing reports
   every shot as the all-zero classical bit string (``metadata["measured"]`` is False):
   classical bits start at zero and nothing wrote them.
"""

from __future__ import annotations

import functools
import os
import secrets
import time
from collections.abc import Mapping
from importlib.metadata import PackageNotFoundError, version
from typing import Any

import numpy as np

from jobkeeper.backend import BackendInfo, Result, Task
from jobkeeper.backends import _kernels as kernels
from jobkeeper.backends._fusion import DEFAULT_MAX_WIDTH, Block
from jobkeeper.backends._local import RunsLocally
from jobkeeper.backends._program import (
    Conditional,
    Gates,
    Measure,
    Program,
    Reset,
    compile_circuit,
)
from jobkeeper.backends._sampling import (
    BitFormatter,
    Floats,
    marginal,
    probabilities_of,
    sample_counts,
)
from jobkeeper.circuit.ir import Circuit, Condition
from jobkeeper.exceptions import ConfigError, PermanentBackendError
from jobkeeper.hashing import digest_of

#: changes whenever the numbers a given seed produces could change.
KERNEL_VERSION = "1"
METHOD = "statevector"
DEFAULT_MAX_QUBITS = 28
DEFAULT_MAX_BRANCHES = 1024
#: outcomes of a mid-circuit measurement or reset less likely than this are not followed.
BRANCH_FLOOR = 1e-12
#: bytes per amplitude: the complex128 state, the float64 outcome probabilities, and a
#: reordered copy of them when the measured bits are not in qubit order.
BYTES_PER_AMPLITUDE = 32
_CONFIG_KEYS = frozenset(
    {"adapter", "max_qubits", "max_memory_bytes", "max_branches", "fusion_width"}
)


_MEMORY_SEEN: list[tuple[float, int]] = []
MEMORY_RECHECK_SECONDS = 2.0


def available_memory() -> int:
    """Bytes the system can give without swapping (MemAvailable), or its free pages.
    Read again at most every couple of seconds: a worker running thousands of small jobs
    would otherwise spend a good share of its time reading /proc/meminfo."""
    now = time.monotonic()
    if _MEMORY_SEEN and now - _MEMORY_SEEN[0][0] < MEMORY_RECHECK_SECONDS:
        return _MEMORY_SEEN[0][1]
    value = _read_available_memory()
    _MEMORY_SEEN[:] = [(now, value)]
    return value


def _read_available_memory() -> int:
    try:
        with open("/proc/meminfo", encoding="ascii") as meminfo:
            for line in meminfo:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return int(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_AVPHYS_PAGES"))


@functools.cache
def _jobkeeper_version() -> str:
    try:
        return version("jobkeeper")
    except PackageNotFoundError:  # pragma: no cover - running from a bare checkout
        return "0+unknown"


def _int_option(config: Mapping[str, Any], key: str, default: int | None) -> int | None:
    value = config.get(key, default)
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise ConfigError(f"statevector backend: {key} must be a positive integer, got {value!r}")
    return value


class StatevectorBackend(RunsLocally):
    """Exact simulation of OpenQASM 2.0 circuits on this machine (picklable)."""

    #: up to 8 qubits (256 amplitudes) a run takes well under a millisecond per hundred
    #: operations: the worker runs such jobs inline (see LocalBackend).
    inline_qubits = 8

    def __init__(self, name: str = "statevector", config: Mapping[str, Any] | None = None):
        config = dict(config or {"adapter": "statevector"})
        unknown = set(config) - _CONFIG_KEYS
        if unknown:
            raise ConfigError(
                f"statevector backend {name!r}: unknown option(s) {', '.join(sorted(unknown))}"
            )
        self.name = name
        self.config = config
        self.max_qubits = _int_option(config, "max_qubits", DEFAULT_MAX_QUBITS) or 0
        self.max_memory_bytes = _int_option(config, "max_memory_bytes", None)
        self.max_branches = _int_option(config, "max_branches", DEFAULT_MAX_BRANCHES) or 0
        self.fusion_width = _int_option(config, "fusion_width", DEFAULT_MAX_WIDTH) or 0

    @property
    def info(self) -> BackendInfo:
        limit = self.memory_limit()
        fits = max(0, (limit // BYTES_PER_AMPLITUDE).bit_length() - 1)
        return BackendInfo(
            name=self.name,
            kind="simulator",
            version=f"{_jobkeeper_version()}+sv{KERNEL_VERSION}",
            max_qubits=min(self.max_qubits, fits),
            mid_circuit_measurement=True,
            deterministic=True,
            config_hash=digest_of(self.config),
            description="exact state-vector simulator (numpy) with seeded sampling",
        )

    def memory_limit(self) -> int:
        """Bytes a run may use: the configured limit, capped by what the system has."""
        limit = available_memory()
        if self.max_memory_bytes is not None:
            limit = min(limit, self.max_memory_bytes)
        return limit

    def _check_memory(self, num_qubits: int, states: int = 1) -> None:
        if num_qubits > self.max_qubits:
            raise PermanentBackendError(
                f"{num_qubits} qubits exceed this backend's max_qubits ({self.max_qubits})"
            )
        amplitudes = 1 << num_qubits
        needed = amplitudes * (16 * states + BYTES_PER_AMPLITUDE - 16)
        limit = self.memory_limit()
        if needed > limit:
            what = "a state vector" if states == 1 else f"{states} branch state vectors"
            raise PermanentBackendError(
                f"{num_qubits} qubits need {needed} bytes for {what} "
                f"(2^{num_qubits} amplitudes × 16 bytes each, plus 16 bytes each for the "
                f"outcome probabilities), more than the {limit} bytes available"
            )

    def execute(self, task: Task) -> Result:
        """Run ``task`` to completion; raises only PermanentBackendError."""
        if task.shots < 0:
            raise PermanentBackendError(f"shots must not be negative, got {task.shots}")
        if task.seed is not None and task.seed < 0:
            raise PermanentBackendError(f"a seed must not be negative, got {task.seed}")
        circuit = task.circuit
        program = compile_circuit(circuit, self.fusion_width)
        self._check_memory(circuit.num_qubits)
        seed = task.seed if task.seed is not None else secrets.randbits(63)
        try:
            records, branches = self._simulate(program)
        except MemoryError as exc:
            raise PermanentBackendError(
                f"ran out of memory simulating {circuit.num_qubits} qubits"
            ) from exc
        formatter = BitFormatter(circuit.cregs, circuit.num_clbits, [c for _, c in program.final])
        rng = np.random.Generator(np.random.PCG64(seed))
        ordered = sorted(records.items())
        counts = sample_counts(rng, task.shots, ordered, formatter)
        probabilities: dict[str, float] | None = None
        if task.exact:
            probabilities = {}
            for record, probs in ordered:
                probabilities_of(formatter, record, probs, probabilities)
        metadata = {
            "seed": str(seed),
            "method": METHOD,
            "kernel_version": KERNEL_VERSION,
            "numpy_version": np.__version__,
            "shots": task.shots,
            "branches": branches,
            "classical_records": len(ordered),
            "measured": program.measures,
            "sampling": "PCG64 multinomial over records, then over final outcomes "
            "(jobkeeper.backends._sampling)",
        }
        if not program.measures:
            metadata["note"] = "the circuit measures nothing: every classical bit reads 0"
        return Result(counts=counts, probabilities=probabilities, metadata=metadata)

    def final_state(self, circuit: Circuit) -> kernels.State:
        """The state vector at the end of a circuit that neither measures, resets nor
        branches before its final measurements (which are ignored). Amplitude index bit
        q is qubit q (qubit 0 least significant)."""
        program = compile_circuit(circuit, self.fusion_width)
        if any(not isinstance(step, Gates) for step in program.steps):
            raise PermanentBackendError(
                "the circuit measures, resets or branches mid-way: it has no single final state"
            )
        self._check_memory(circuit.num_qubits)
        state = _initial_state(circuit.num_qubits)
        for step in program.steps:
            assert isinstance(step, Gates)
            for block in step.blocks:
                kernels.apply(state, circuit.num_qubits, block.matrix, block.qubits, block.kind)
        return state

    def _simulate(self, program: Program) -> tuple[dict[int, Floats], int]:
        """Exact outcome weights per classical record (before the final measurements),
        each as a vector over the final measurements' outcomes; and the branch count."""
        n = program.num_qubits
        final_qubits = [q for q, _ in program.final]
        records: dict[int, Floats] = {}
        # Depth first, and no other reference to a state: a finished branch's memory is
        # free before the next one starts (the memory check counts the stack).
        stack: list[tuple[int, kernels.State, float, int]] = [(0, _initial_state(n), 1.0, 0)]
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
                if step.condition is not None and not _holds(step.condition, record):
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
                        raise PermanentBackendError(
                            f"the circuit splits into more than {self.max_branches} outcome "
                            "branches (mid-circuit measurements and resets); raise "
                            "max_branches or measure at the end"
                        )
                    self._check_memory(n, states=len(stack) + 2)
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
        return records, branches


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


def _initial_state(num_qubits: int) -> kernels.State:
    state = np.zeros(1 << num_qubits, dtype=np.complex128)
    state[0] = 1.0
    return state


def _holds(condition: Condition, record: int) -> bool:
    value = sum(((record >> c) & 1) << i for i, c in enumerate(condition.clbits))
    return value == condition.value


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
