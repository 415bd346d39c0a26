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
    max_qubits = 12                  # default 12 (at most 16): ρ of 12 qubits is 256 MiB
    pricing = { per_task = 0.0, per_shot = 0.001, currency = "credits" }   # optional
    # also: max_memory_bytes, max_branches (live classical records, default 1024),
    # fusion_width (vector qubits per fused noisy block, default 4)

or the noise figures in a ``calibration`` table of the same keys (a device's
calibration snapshot, see :func:`noise_model_from_calibration`). What each figure does is
in :mod:`._noise`; ``info.calibration`` is the model as a JSON-ready table.

How a task runs: the circuit is compiled with its noise (:mod:`._dm_program`), memory is
checked before anything is allocated, ρ evolves in place as a vector of 4^n entries (the
state-vector kernels on 2n qubits: a noisy gate is one superoperator block, a run of
noiseless gates U is applied as U·(U·ρ)†, on the row qubits only, which the kernels
handle several times faster), and the classical records are tracked exactly: one
unnormalised ρ per record, split by each mid-circuit measurement (with its readout
error), merged when records coincide, conditioned by ``if``; ``reset`` is an exact channel
and never splits. Final measurements are read off each record's diagonal with the readout
error applied as a stochastic matrix. Counts are drawn exactly as the state-vector
backend draws them (:mod:`._sampling`), so the same seed gives the same counts from the
same distribution, and the bit strings are formatted by the same code.
"""

from __future__ import annotations

import secrets
from collections.abc import Mapping
from typing import Any

import numpy as np
import numpy.typing as npt
from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from jobkeeper.backend import BackendInfo, Pricing, Result, Task
from jobkeeper.backends import _dm_state as dm
from jobkeeper.backends import _kernels as kernels
from jobkeeper.backends._dm_program import (
    DEFAULT_MAX_WIDTH,
    Channel,
    DensityProgram,
    compile_density,
)
from jobkeeper.backends._local import RunsLocally
from jobkeeper.backends._noise import (
    NOISE_KEYS,
    NoiseModel,
    NoiseTable,
    log10_success_probability,
    noise_model_from_calibration,
)
from jobkeeper.backends._program import Measure, Reset
from jobkeeper.backends._sampling import BitFormatter, Floats, probabilities_of, sample_counts
from jobkeeper.backends.statevector import _holds, _jobkeeper_version, available_memory
from jobkeeper.circuit.ir import Circuit
from jobkeeper.exceptions import ConfigError, PermanentBackendError
from jobkeeper.hashing import digest_of

__all__ = ["DensityMatrixBackend", "NoiseModel", "from_config", "noise_model_from_calibration"]

#: changes whenever the numbers a given seed produces could change.
KERNEL_VERSION = "1"
METHOD = "densitymatrix"
DEFAULT_MAX_QUBITS = 12
DEFAULT_MAX_BRANCHES = 1024
#: classical records less likely than this are not followed (as in the state-vector one).
BRANCH_FLOOR = 1e-12
#: bytes per entry of ρ (complex128).
BYTES_PER_ENTRY = 16


class _PricingTable(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    per_task: float = Field(default=0.0, ge=0)
    per_shot: float = Field(default=0.0, ge=0)
    currency: str = "credits"


class _Config(NoiseTable):
    adapter: str = "densitymatrix"
    max_qubits: int = Field(default=DEFAULT_MAX_QUBITS, ge=1, le=16)
    max_memory_bytes: int | None = Field(default=None, ge=1)
    max_branches: int = Field(default=DEFAULT_MAX_BRANCHES, ge=1)
    fusion_width: int = Field(default=DEFAULT_MAX_WIDTH, ge=2, le=8)
    pricing: _PricingTable | None = None
    calibration: dict[str, Any] | None = None

    @model_validator(mode="after")
    def _one_source(self) -> _Config:
        if self.calibration is not None:
            top = sorted(set(NOISE_KEYS) & self.model_fields_set)
            if top:
                raise ValueError(
                    f"noise is given both at top level ({', '.join(top)}) and in calibration; "
                    "give it in one place"
                )
        return self


def _parse(name: str, config: Mapping[str, Any]) -> tuple[_Config, NoiseModel]:
    try:
        table = _Config.model_validate(dict(config))
    except ValidationError as exc:
        problems = "; ".join(
            (".".join(str(p) for p in err["loc"]) + ": " if err["loc"] else "")
            + str(err["msg"]).removeprefix("Value error, ")
            for err in exc.errors()
        )
        raise ConfigError(f"densitymatrix backend {name!r}: {problems}") from None
    if table.calibration is not None:
        try:
            noise = noise_model_from_calibration(table.calibration)
        except ConfigError as exc:
            raise ConfigError(f"densitymatrix backend {name!r}: {exc}") from None
    else:
        noise = noise_model_from_calibration(
            {k: getattr(table, k) for k in NOISE_KEYS if k in table.model_fields_set}
        )
    return table, noise


class DensityMatrixBackend(RunsLocally):
    """Exact noisy simulation of OpenQASM 2.0 circuits on this machine (picklable).

    Build it from configuration with :func:`from_config`, or directly from a
    :class:`NoiseModel` (``DensityMatrixBackend(noise=NoiseModel(...))``).
    """

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
        if noise is not None:
            if config is not None:
                raise ConfigError("give either a configuration or a noise model, not both")
            config = {"adapter": "densitymatrix", **noise.to_json()}
        config = dict(config or {"adapter": "densitymatrix"})
        table, model = _parse(name, config)
        self.name = name
        self.config = config
        self.noise = model
        self.max_qubits = table.max_qubits
        if model.num_qubits is not None:
            self.max_qubits = min(self.max_qubits, model.num_qubits)
        self.max_memory_bytes = table.max_memory_bytes
        self.max_branches = table.max_branches
        self.fusion_width = table.fusion_width
        self.pricing = Pricing(**table.pricing.model_dump()) if table.pricing else None

    @property
    def info(self) -> BackendInfo:
        fits = max(0, ((self.memory_limit() // BYTES_PER_ENTRY).bit_length() - 1) // 2)
        return BackendInfo(
            name=self.name,
            kind="simulator",
            version=f"{_jobkeeper_version()}+dm{KERNEL_VERSION}",
            max_qubits=min(self.max_qubits, fits),
            mid_circuit_measurement=True,
            deterministic=True,
            pricing=self.pricing,
            calibration=self.noise.to_json(),
            config_hash=digest_of(self.config),
            description="noisy density-matrix simulator (numpy) with seeded sampling",
        )

    def memory_limit(self) -> int:
        """Bytes a run may use: the configured limit, capped by what the system has."""
        limit = available_memory()
        if self.max_memory_bytes is not None:
            limit = min(limit, self.max_memory_bytes)
        return limit

    def _check_memory(self, num_qubits: int, states: int = 1) -> None:
        needed = (1 << (2 * num_qubits)) * BYTES_PER_ENTRY * states
        if num_qubits > self.max_qubits:
            raise PermanentBackendError(
                f"{num_qubits} qubits exceed this backend's max_qubits ({self.max_qubits}): "
                f"a density matrix of {num_qubits} qubits needs {needed} bytes "
                f"(4^{num_qubits} entries × {BYTES_PER_ENTRY} bytes)"
            )
        limit = self.memory_limit()
        if needed > limit:
            what = "a density matrix" if states == 1 else f"{states} density matrices"
            raise PermanentBackendError(
                f"{num_qubits} qubits need {needed} bytes for {what} "
                f"(4^{num_qubits} entries × {BYTES_PER_ENTRY} bytes each), more than the "
                f"{limit} bytes available"
            )

    def compile(self, circuit: Circuit) -> DensityProgram:
        """The circuit with its noise, checked against the limits (nothing allocated)."""
        self._check_memory(circuit.num_qubits)
        return compile_density(circuit, self.noise, self.fusion_width)

    def execute(self, task: Task) -> Result:
        """Run ``task`` to completion; raises only PermanentBackendError."""
        if task.shots < 0:
            raise PermanentBackendError(f"shots must not be negative, got {task.shots}")
        circuit = task.circuit
        program = self.compile(circuit)
        seed = task.seed if task.seed is not None else secrets.randbits(63)
        try:
            states = self._simulate(program)
        except MemoryError as exc:
            raise PermanentBackendError(
                f"ran out of memory simulating {circuit.num_qubits} qubits"
            ) from exc
        final_qubits = [q for q, _ in program.final]
        errors = [self.noise.readout(q) for q in final_qubits]
        n = program.num_qubits
        records: dict[int, Floats] = {
            record: dm.readout_distribution(dm.diagonal(rho, n), n, final_qubits, errors)
            for record, rho in states.items()
        }
        del states
        # From here on exactly as the state-vector backend: same order, same draws.
        formatter = BitFormatter(circuit.cregs, circuit.num_clbits, [c for _, c in program.final])
        rng = np.random.Generator(np.random.PCG64(seed))
        ordered = sorted(records.items())
        counts = sample_counts(rng, task.shots, ordered, formatter)
        probabilities: dict[str, float] | None = None
        if task.exact:
            probabilities = {}
            for record, probs in ordered:
                probabilities_of(formatter, record, probs, probabilities)
        ones, twos, wider = program.operations
        metadata: dict[str, Any] = {
            "seed": str(seed),
            "method": METHOD,
            "kernel_version": KERNEL_VERSION,
            "numpy_version": np.__version__,
            "shots": task.shots,
            "classical_records": len(ordered),
            "measured": program.measures,
            "noise": self.noise.to_json(),
            "operations": {"1q": ones, "2q": twos, "wider": wider},
            "sampling": "multinomial over records, then over final outcomes (see docs)",
        }
        if not program.measures:
            metadata["note"] = "the circuit measures nothing: every classical bit reads 0"
        return Result(counts=counts, probabilities=probabilities, metadata=metadata)

    def final_density_matrix(self, circuit: Circuit) -> npt.NDArray[np.complex128]:
        """ρ at the end of ``circuit`` before its final measurements (which are ignored),
        averaged over the outcomes of any mid-circuit measurements: a 2^n × 2^n matrix,
        basis index bit q = qubit q (qubit 0 least significant)."""
        program = self.compile(circuit)
        n = program.num_qubits
        total: kernels.State | None = None
        for rho in self._simulate(program).values():
            total = rho if total is None else total + rho
        assert total is not None
        return dm.as_matrix(total, n)

    def success_probability(self, circuit: Circuit) -> float:
        """**log10** of the estimated probability that a run of ``circuit`` is free of
        any error (pre-flight's estimate; a log so that long circuits do not underflow):
        each operation contributes log10(1 − its error probability), see
        :func:`._noise.log10_success_probability` for the terms. 0.0 means no noise."""
        return log10_success_probability(circuit, self.noise)

    def _simulate(self, program: DensityProgram) -> dict[int, kernels.State]:
        """One unnormalised ρ per classical record (clbit c = bit c), its trace being
        the record's probability; records below BRANCH_FLOOR are dropped."""
        n = program.num_qubits
        records: dict[int, kernels.State] = {0: dm.initial_density(n)}
        for step in program.steps:
            if isinstance(step, Channel):
                for record, rho in records.items():
                    if step.condition is None or _holds(step.condition, record):
                        _apply_channel(rho, n, step)
            elif isinstance(step, Reset):
                error = self.noise.readout(step.qubit)
                for record, rho in records.items():
                    if step.condition is None or _holds(step.condition, record):
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
            if step.condition is not None and not _holds(step.condition, record):
                add(record, rho)
                continue
            if len(out) + len(records) + 2 > self.max_branches:
                raise PermanentBackendError(
                    f"the circuit splits into more than {self.max_branches} classical records "
                    "(mid-circuit measurements); raise max_branches or measure at the end"
                )
            self._check_memory(n, states=len(out) + len(records) + 2)
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
    ``gate_time_1q``, ``gate_time_2q`` (all optional, see :mod:`._noise`) or the same in
    a ``calibration`` table; ``max_qubits`` (default 12), ``max_memory_bytes``,
    ``max_branches`` (default 1024), ``fusion_width`` (vector qubits, default 4),
    ``pricing`` (``per_task``, ``per_shot``, ``currency``). Raises ConfigError."""
    return DensityMatrixBackend(name, config)
