"""The noisy trajectory simulator: samples of a noisy device's counts with the memory of a
state vector (2^n amplitudes, where the density matrix needs 4^n).

Configuration (``[backends.NAME]`` with ``adapter = "trajectories"``): the noise keys of
the density-matrix backend, unchanged, so one block can be switched between the two::

    depolarizing_1q = 0.001          # error probability per one-qubit operation
    depolarizing_2q = 0.005          # ... per two-qubit operation
    readout_error = 0.01             # or a list, one per qubit
    t1 = 1e-4                        # optional, seconds (or per qubit)
    t2 = 8e-5                        # optional, seconds (or per qubit), ≤ 2·t1
    gate_time_1q = 5e-8              # seconds, required with t1/t2
    gate_time_2q = 3e-7
    gate_time_id = 5e-8              # optional (default gate_time_1q)
    gate_time_readout = 1e-6         # optional (default 0)
    trajectories = 500               # optional: at most this many trajectories
    max_qubits = 28                  # default 28
    # also: max_memory_bytes, fusion_width (qubits per fused block, default 5),
    # pricing, calibration (a noise table), noise_from and noise_refresh (see below)

``noise_from = "NAME"`` takes the noise from the latest calibration snapshot archived by
the REST backend NAME (``noise_refresh = true``: fetched live instead); the keep
resolves it before the backend is built. :mod:`.calibration` documents the mapping,
which every result records with the snapshot's digest.

How many trajectories: by default one per shot up to 1,000 shots, so that the counts are
an exact sample of the noisy distribution; above that 1,000 trajectories, the shots
shared among them as evenly as possible, and the result says so (shots of one
trajectory are not independent draws of the noisy distribution: the counts spread more
than a multinomial would). ``trajectories = N`` caps the count lower, trading accuracy
for time. The method and its randomness are in :mod:`.trajectory_run`.
"""

from __future__ import annotations

import math
import secrets
from collections.abc import Mapping
from typing import Any

import numpy as np
from pydantic import Field, StrictInt

from jobkeeper.backend import Result, Task
from jobkeeper.backends.sim.base import (
    estimated_seconds,
)
from jobkeeper.backends.sim.noise import (
    NoiseModel,
    log10_success_probability,
)
from jobkeeper.backends.sim.noisy_options import NoisyOptions, NoisySimulator
from jobkeeper.backends.sim.sampling import TABLE_FROM, BitFormatter
from jobkeeper.backends.sim.trajectory_program import (
    DEFAULT_MAX_WIDTH,
    TrajectoryProgram,
    compile_trajectories,
)
from jobkeeper.backends.sim.trajectory_run import Runner, Trajectory
from jobkeeper.circuit.ir import NON_GATE_OPERATIONS, Circuit
from jobkeeper.counts import CountTable
from jobkeeper.exceptions import PermanentBackendError

__all__ = ["TrajectoryBackend", "from_config", "share_shots"]

METHOD = "trajectories"
DEFAULT_MAX_QUBITS = 28
#: shots up to this many get a trajectory each; more share this many.
DEFAULT_TRAJECTORIES = 1000
#: bytes per amplitude: the quiet state and a working copy (complex128 each), and one
#: trajectory's outcome probabilities (float64).
BYTES_PER_AMPLITUDE = 40


class TrajectoryOptions(NoisyOptions):
    adapter: str = METHOD
    max_qubits: StrictInt = Field(default=DEFAULT_MAX_QUBITS, ge=1, le=40)
    fusion_width: StrictInt = Field(default=DEFAULT_MAX_WIDTH, ge=1, le=8)
    trajectories: StrictInt | None = Field(default=None, ge=1)


def share_shots(shots: int, cap: int | None) -> list[int]:
    """Shots per trajectory: one each up to ``cap`` (default 1,000) trajectories, else
    ``cap`` trajectories sharing the shots as evenly as possible (the first ones take
    one more)."""
    count = min(shots, cap or DEFAULT_TRAJECTORIES)
    if count == 0:
        return []
    base, extra = divmod(shots, count)
    return [base + 1] * extra + [base] * (count - extra)


class TrajectoryBackend(NoisySimulator[TrajectoryProgram]):
    """Noisy simulation of OpenQASM 2.0 circuits by sampled trajectories (picklable).

    Build it from configuration with :func:`from_config`, or directly from a
    :class:`NoiseModel` (``TrajectoryBackend(noise=NoiseModel(...))``).
    """

    method = METHOD
    kernel_version = "1"
    version_tag = "traj"
    description = "noisy trajectory simulator (numpy state vectors) with seeded sampling"
    inline_qubits = 4

    def __init__(
        self,
        name: str = METHOD,
        config: Mapping[str, Any] | None = None,
        *,
        noise: NoiseModel | None = None,
    ):
        self.trajectories = self._configure(TrajectoryOptions, name, config, noise).trajectories

    def qubits_that_fit(self, limit: int) -> int:
        return max(0, (limit // BYTES_PER_AMPLITUDE).bit_length() - 1)

    def footprint(self, num_qubits: int, states: int = 1) -> tuple[int, str]:
        needed = (1 << num_qubits) * BYTES_PER_AMPLITUDE
        return needed, (
            f"2^{num_qubits} amplitudes × {BYTES_PER_AMPLITUDE} bytes: two state vectors "
            "and the outcome probabilities"
        )

    def compile(self, circuit: Circuit) -> TrajectoryProgram:
        """The circuit with its noise sites, checked against the limits."""
        self.check_memory(circuit.num_qubits)
        return compile_trajectories(circuit, self.noise, self.fusion_width)

    def execute(self, task: Task) -> Result:
        """Run ``task`` to completion; raises only PermanentBackendError."""
        if task.shots < 0:
            raise PermanentBackendError(f"shots must not be negative, got {task.shots}")
        if task.seed is not None and task.seed < 0:
            raise PermanentBackendError(f"a seed must not be negative, got {task.seed}")
        if task.exact:
            raise PermanentBackendError(
                f"{self.name} samples trajectories and has no exact probabilities; the "
                "densitymatrix adapter with the same noise keys gives them (up to ~12 qubits)"
            )
        circuit = task.circuit
        program = self.compile(circuit)
        seed = task.seed if task.seed is not None else secrets.randbits(63)
        shares = share_shots(task.shots, self.trajectories)
        runner = Runner(program, self.noise, shares, seed)
        try:
            done = runner.run()
        except MemoryError as exc:
            raise PermanentBackendError(
                f"ran out of memory simulating {circuit.num_qubits} qubits"
            ) from exc
        formatter = BitFormatter(circuit.cregs, circuit.num_clbits, [c for _, c in program.final])
        counts = _counts(formatter, done)
        ones, twos, wider = program.operations
        metadata: dict[str, Any] = {
            "seed": str(seed),
            "method": METHOD,
            "kernel_version": self.kernel_version,
            "numpy_version": np.__version__,
            "shots": task.shots,
            "measured": program.measures,
            "noise": self.calibration(),
            "operations": {"1q": ones, "2q": twos, "wider": wider},
            "trajectories": len(shares),
            "shots_per_trajectory": _sharing(shares),
            "trajectories_with_events": runner.diverged,
            "sampling": "per trajectory PCG64(SeedSequence(seed, spawn_key=(t,))): events, "
            "then outcomes by the inverse cumulative distribution "
            "(jobkeeper.backends.sim.trajectory_run)",
        }
        notes = []
        if shares and shares[0] > 1:
            notes.append(
                f"{task.shots} shots share {len(shares)} trajectories ({_sharing(shares)} "
                "shots each): shots of one trajectory share its errors, so the counts "
                "spread more than independent shots of the noisy device would"
            )
        if not program.measures:
            notes.append("the circuit measures nothing: every classical bit reads 0")
        if notes:
            metadata["note"] = "; ".join(notes)
        return Result(counts=counts, metadata=metadata)

    def simulation_plan(self, circuit: Circuit, shots: int) -> dict[str, Any]:
        """Pre-flight's view (see Simulator.simulation_plan), with the trajectories and
        the expected work: one shared quiet run, and per trajectory the part after its
        first event."""
        plan = super().simulation_plan(circuit, shots)
        shares = share_shots(shots, self.trajectories)
        plan["trajectories"] = len(shares)
        plan["shots_per_trajectory"] = _sharing(shares)
        if plan["seconds"] is None:
            return plan
        # Errors as events spread evenly over the run at λ = −ln P(error-free): the work
        # after a trajectory's first event is a fraction 1 − (1 − e^{−λ})/λ of a run.
        rate = -math.log(10.0) * log10_success_probability(circuit, self.noise)
        tail = 1.0 - (-math.expm1(-rate) / rate if rate > 1e-12 else 1.0)
        gates = sum(op.name not in NON_GATE_OPERATIONS for op in circuit.operations)
        passes = max(1.0, gates / self.gates_per_pass)
        entries = 1 << circuit.num_qubits
        # Each trajectory also copies the state and reads its outcome probabilities.
        per = estimated_seconds(tail * passes + 2, entries)
        plan["seconds"] = estimated_seconds(passes, entries) + len(shares) * per
        return plan

    def success_probability(self, circuit: Circuit) -> float:
        """**log10** of the estimated probability of an error-free run (as the
        density-matrix backend's, from the same noise model)."""
        return log10_success_probability(circuit, self.noise)


def _sharing(shares: list[int]) -> str:
    if not shares:
        return "0"
    low, high = min(shares), max(shares)
    return str(low) if low == high else f"{low}-{high}"


def _counts(formatter: BitFormatter, done: list[Trajectory]) -> Mapping[str, int]:
    """Counts of every trajectory's outcomes, grouped by classical record."""
    by_record: dict[int, list[Any]] = {}
    for t in done:
        if t.shots:
            by_record.setdefault(t.record, []).append(t.outcomes)
    parts = []
    for record in sorted(by_record):
        values, numbers = np.unique(np.concatenate(by_record[record]), return_counts=True)
        parts.append((record, values.astype(np.int64), numbers.astype(np.int64)))
    if sum(len(v) for _, v, _ in parts) > TABLE_FROM and formatter.width:
        return CountTable.from_parts([(formatter.rows(r, v), c) for r, v, c in parts])
    counts: dict[str, int] = {}
    for record, values, numbers in parts:
        for key, value in zip(formatter.format(record, values), numbers.tolist(), strict=True):
            counts[key] = counts.get(key, 0) + value
    return counts


def from_config(name: str, config: Mapping[str, Any]) -> TrajectoryBackend:
    """The registry's factory: the keys in the module docstring. Raises ConfigError."""
    return TrajectoryBackend(name, config)
