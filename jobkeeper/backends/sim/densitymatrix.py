"""The noisy density-matrix simulator: a local backend with exact noisy distributions and
seeded sampling.

Configuration (``[backends.NAME]`` with ``adapter = "densitymatrix"``)::

    depolarizing_1q = 0.001          # error probability per one-qubit operation
    depolarizing_2q = 0.005          # ... per two-qubit operation
    readout_error = 0.01             # or a list, one per qubit
    t1 = 1e-4                        # optional, seconds (or per qubit)
    t2 = 8e-5                        # optional, seconds (or per qubit), ≤ 2·t1
    gate_time_1q = 2e-8              # seconds, required with t1/t2
    gate_time_2q = 2e-7
    gate_time_id = 2e-8              # optional (default gate_time_1q)
    gate_time_readout = 1e-6         # optional: the measured qubit relaxes this long
    max_qubits = 12                  # default 12 (at most 16): ρ of 12 qubits is 256 MiB
    pricing = { per_task = 0.0, per_shot = 0.001, currency = "credits" }   # optional
    # also: max_memory_bytes, max_branches (live classical records, default 1024),
    # fusion_width (vector qubits per fused noisy block, default 4)

or the noise figures in a ``calibration`` table of the same keys (a device's
calibration snapshot, see :func:`noise_model_from_calibration`). What each figure does is
in :mod:`.noise`; ``info.calibration`` is the model as a JSON-ready table. Or
``noise_from = "NAME"``: the noise of the REST backend NAME's latest archived calibration
snapshot (``noise_refresh = true``: fetched live), mapped as :mod:`.calibration` says.

How a task runs: the circuit is compiled with its noise (:mod:`.density_program`), memory is
checked before anything is allocated, ρ evolves in place as a vector of 4^n entries (the
state-vector kernels on 2n qubits: a noisy gate is one superoperator block, a run of
noiseless gates U is applied as U·(U·ρ)†, on the row qubits only, which the kernels
handle several times faster), and the classical records are tracked exactly: one
unnormalised ρ per record, split by each mid-circuit measurement (with its readout
error), merged when records coincide, conditioned by ``if``; ``reset`` is an exact channel
and never splits. Final measurements are read off each record's diagonal with the readout
error applied as a stochastic matrix. Counts are drawn exactly as the state-vector
backend draws them (:mod:`.sampling`), so the same seed gives the same counts from the
same distribution, and the bit strings are formatted by the same code.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import numpy.typing as npt
from pydantic import Field, StrictInt

from jobkeeper.backends.sim import density_state as dm
from jobkeeper.backends.sim import kernels
from jobkeeper.backends.sim.base import (
    BRANCH_FLOOR,
    holds,
)
from jobkeeper.backends.sim.density_program import (
    DEFAULT_MAX_WIDTH,
    Channel,
    DensityProgram,
    compile_density,
)
from jobkeeper.backends.sim.noise import (
    NoiseModel,
    log10_success_probability,
    noise_model_from_calibration,
)
from jobkeeper.backends.sim.noisy_options import NoisyOptions, NoisySimulator
from jobkeeper.backends.sim.program import Measure, Reset
from jobkeeper.backends.sim.sampling import Floats
from jobkeeper.circuit.ir import Circuit

__all__ = ["DensityMatrixBackend", "NoiseModel", "from_config", "noise_model_from_calibration"]

DEFAULT_MAX_QUBITS = 12
#: bytes per entry of ρ (complex128).
BYTES_PER_ENTRY = 16


class DensityMatrixOptions(NoisyOptions):
    adapter: str = "densitymatrix"
    max_qubits: StrictInt = Field(default=DEFAULT_MAX_QUBITS, ge=1, le=16)
    fusion_width: StrictInt = Field(default=DEFAULT_MAX_WIDTH, ge=2, le=8)


class DensityMatrixBackend(NoisySimulator[DensityProgram]):
    """Exact noisy simulation of OpenQASM 2.0 circuits on this machine (picklable).

    Build it from configuration with :func:`from_config`, or directly from a
    :class:`NoiseModel` (``DensityMatrixBackend(noise=NoiseModel(...))``).
    """

    method = "densitymatrix"
    kernel_version = "1"
    version_tag = "dm"
    entry_qubits = 2
    #: a noisy gate is a block of its own (its superoperator fills the fusion width).
    gates_per_pass = 1.0
    description = "noisy density-matrix simulator (numpy) with seeded sampling"
    #: up to 4 qubits (a 16 × 16 density matrix) a noisy run takes about a third of a
    #: millisecond: the worker runs such jobs inline (see LocalBackend).
    inline_qubits = 4

    def __init__(
        self,
        name: str = "densitymatrix",
        config: Mapping[str, Any] | None = None,
        *,
        noise: NoiseModel | None = None,
    ):
        self._configure(DensityMatrixOptions, name, config, noise)

    def qubits_that_fit(self, limit: int) -> int:
        return max(0, ((limit // BYTES_PER_ENTRY).bit_length() - 1) // 2)

    def footprint(self, num_qubits: int, states: int) -> tuple[int, str]:
        needed = (1 << (2 * num_qubits)) * BYTES_PER_ENTRY * states
        what = "a density matrix" if states == 1 else f"{states} density matrices"
        return needed, f"{what}: 4^{num_qubits} entries × {BYTES_PER_ENTRY} bytes each"

    def compile(self, circuit: Circuit) -> DensityProgram:
        """The circuit with its noise, checked against the limits (nothing allocated)."""
        self.check_memory(circuit.num_qubits)
        return compile_density(circuit, self.noise, self.fusion_width)

    def outcome_weights(self, program: DensityProgram) -> tuple[dict[int, Floats], dict[str, Any]]:
        """Each record's final readings with their readout error, from its ρ's diagonal."""
        final_qubits = [q for q, _ in program.final]
        errors = [self.noise.readout(q) for q in final_qubits]
        n = program.num_qubits
        weights = {
            record: dm.readout_distribution(dm.diagonal(rho, n), n, final_qubits, errors)
            for record, rho in self.evolve(program).items()
        }
        ones, twos, wider = program.operations
        details = {
            "noise": self.calibration(),
            "operations": {"1q": ones, "2q": twos, "wider": wider},
        }
        return weights, details

    def final_density_matrix(self, circuit: Circuit) -> npt.NDArray[np.complex128]:
        """ρ at the end of ``circuit`` before its final measurements (which are ignored),
        averaged over the outcomes of any mid-circuit measurements: a 2^n × 2^n matrix,
        basis index bit q = qubit q (qubit 0 least significant)."""
        program = self.compile(circuit)
        n = program.num_qubits
        total: kernels.State | None = None
        for rho in self.evolve(program).values():
            total = rho if total is None else total + rho
        assert total is not None
        return dm.as_matrix(total, n)

    def success_probability(self, circuit: Circuit) -> float:
        """**log10** of the estimated probability that a run of ``circuit`` is free of
        any error (pre-flight's estimate; a log so that long circuits do not underflow):
        each operation contributes log10(1 − its error probability), see
        :func:`.noise.log10_success_probability` for the terms. 0.0 means no noise."""
        return log10_success_probability(circuit, self.noise)

    def evolve(self, program: DensityProgram) -> dict[int, kernels.State]:
        """One unnormalised ρ per classical record (clbit c = bit c), its trace being
        the record's probability; records below BRANCH_FLOOR are dropped."""
        n = program.num_qubits
        records: dict[int, kernels.State] = {0: dm.initial_density(n)}
        for step in program.steps:
            if isinstance(step, Channel):
                for record, rho in records.items():
                    if step.condition is None or holds(step.condition, record):
                        _apply_channel(rho, n, step)
            elif isinstance(step, Reset):
                error = self.noise.readout(step.qubit)
                for record, rho in records.items():
                    if step.condition is None or holds(step.condition, record):
                        dm.reset(rho, n, step.qubit, error)
            else:
                records = self._measure(records, n, step)
        return records

    def _measure(
        self, records: dict[int, kernels.State], n: int, step: Measure
    ) -> dict[int, kernels.State]:
        error = self.noise.readout(step.qubit)
        bit = 1 << step.clbit
        out: dict[int, kernels.State] = {}

        def add(record: int, rho: kernels.State) -> None:
            if dm.trace(rho, n) <= BRANCH_FLOOR:
                return
            if record in out:
                out[record] += rho
            else:
                out[record] = rho

        for record in sorted(records):
            rho = records.pop(record)
            if step.condition is not None and not holds(step.condition, record):
                add(record, rho)
                continue
            if len(out) + len(records) + 2 > self.max_branches:
                raise self.too_many_branches("classical records (mid-circuit measurements)")
            self.check_memory(n, states=len(out) + len(records) + 2)
            zero, one = dm.measure(rho, n, step.qubit, error)
            add(record & ~bit, zero)
            add(record | bit, one)
        return out


def _apply_channel(rho: kernels.State, n: int, step: Channel) -> None:
    width = 2 * n
    if not step.unitary:
        for block in step.blocks:
            kernels.apply(rho, width, block.matrix, block.qubits, block.kind)
        return
    # U ρ U† = U·(U·ρ)† for Hermitian ρ: both products on the row qubits (see Channel).
    for side in range(2):
        if side:
            dm.conjugate_transpose(rho, n)
        for block in step.blocks:
            rows = tuple(n + q for q in block.qubits)
            kernels.apply(rho, width, block.matrix, rows, block.kind)


def from_config(name: str, config: Mapping[str, Any]) -> DensityMatrixBackend:
    """The registry's factory. ``config`` keys: ``adapter``; the noise figures
    ``depolarizing_1q``, ``depolarizing_2q``, ``readout_error``, ``t1``, ``t2``,
    ``gate_time_1q``, ``gate_time_2q`` (all optional, see :mod:`.noise`) or the same in
    a ``calibration`` table; ``max_qubits`` (default 12), ``max_memory_bytes``,
    ``max_branches`` (default 1024), ``fusion_width`` (vector qubits, default 4),
    ``pricing`` (``per_task``, ``per_shot``, ``currency``). Raises ConfigError."""
    return DensityMatrixBackend(name, config)
