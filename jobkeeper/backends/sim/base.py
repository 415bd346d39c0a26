"""What every simulator shares: configuration limits, the memory check, the description
(:class:`~jobkeeper.backend.BackendInfo`), and the run itself from a compiled program's
outcome weights to seeded counts.

A simulator subclass supplies four things: ``compile`` (a circuit → a program, with the
memory checked before anything is allocated), ``outcome_weights`` (the exact outcome
distribution per classical record), ``footprint`` (bytes and the arithmetic behind them,
for the memory check's message), and ``qubits_that_fit``. Everything after the weights —
the seed, the draws, exact probabilities, the metadata — is here, so two simulators given
the same weights and seed give the same counts, formatted by the same code.

A simulator finishes inside ``start`` (idempotent: the same task and seed give the same
result, so the client key is not needed); there are never handles to poll or cancel.
"""

from __future__ import annotations

import os
import secrets
import time
from collections.abc import Mapping, Sequence
from typing import Any, ClassVar, Generic, Protocol, TypeVar

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, StrictInt, ValidationError

from jobkeeper._version import __version__
from jobkeeper.backend import BackendInfo, BatchPoint, Polled, Pricing, Result, Started, Task
from jobkeeper.backends.sim.batch import bind_points, run_one_by_one
from jobkeeper.backends.sim.sampling import BitFormatter, Floats, probabilities_of, sample_counts
from jobkeeper.circuit.ir import NON_GATE_OPERATIONS, Circuit, Condition
from jobkeeper.circuit.qasm3.template import Template
from jobkeeper.exceptions import ConfigError, PermanentBackendError
from jobkeeper.hashing import digest_of

#: outcomes of a mid-circuit measurement or reset (classical records) less likely than
#: this are not followed.
BRANCH_FLOOR = 1e-12
DEFAULT_MAX_BRANCHES = 1024
MEMORY_RECHECK_SECONDS = 2.0
SAMPLING = (
    "PCG64 multinomial over records, then over final outcomes (jobkeeper.backends.sim.sampling)"
)

_MEMORY_SEEN: list[tuple[float, int]] = []


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


#: CPU seconds per state entry per fused pass, and per pass, on the development machine
#: (benchmarks/bench_trajectories.py: a 20-qubit depth-20 noiseless run, 50 passes over
#: 2^20 amplitudes in 0.47 s): pre-flight's rough time estimates rest on them.
SECONDS_PER_ENTRY_PASS = 1e-8
SECONDS_PER_PASS = 1e-4


def estimated_seconds(passes: float, entries: int) -> float:
    """Rough CPU time of ``passes`` fused passes over ``entries`` state entries."""
    return passes * (entries * SECONDS_PER_ENTRY_PASS + SECONDS_PER_PASS)


def holds(condition: Condition, record: int) -> bool:
    """Whether an ``if`` holds for a classical record (clbit c = bit c of ``record``)."""
    value = sum(((record >> c) & 1) << i for i, c in enumerate(condition.clbits))
    return value == condition.value


# -- configuration ----------------------------------------------------------------------


class PricingTable(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    per_task: float = Field(default=0.0, ge=0)
    per_shot: float = Field(default=0.0, ge=0)
    currency: str = "credits"


class SimulatorOptions(BaseModel):
    """The limits every simulator takes from its ``[backends.NAME]`` table. Integers are
    strict: a TOML ``true`` or ``"5"`` is refused, not read as a number."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    adapter: str
    max_qubits: StrictInt = Field(ge=1)
    max_memory_bytes: StrictInt | None = Field(default=None, ge=1)
    max_branches: StrictInt = Field(default=DEFAULT_MAX_BRANCHES, ge=1)
    fusion_width: StrictInt = Field(ge=1)


Options = TypeVar("Options", bound=BaseModel)


def parse_options(model: type[Options], what: str, config: Mapping[str, Any]) -> Options:
    """``config`` validated by ``model``; ConfigError naming ``what`` and every problem on
    one line (an unknown key is called an unknown option)."""
    try:
        return model.model_validate(dict(config))
    except ValidationError as exc:
        problems = []
        for err in exc.errors():
            where = ".".join(str(p) for p in err["loc"])
            message = str(err["msg"]).removeprefix("Value error, ")
            if err["type"] == "extra_forbidden":
                message = "unknown option"
            problems.append(f"{where}: {message}" if where else message)
        raise ConfigError(f"{what}: {'; '.join(problems)}") from None


# -- the simulator ----------------------------------------------------------------------


class Compiled(Protocol):
    """What the shared run needs of a compiled program."""

    @property
    def num_qubits(self) -> int: ...

    #: (qubit, clbit) of the final measurements in ascending clbit order: the bits of an
    #: outcome index (see :mod:`.sampling`).
    @property
    def final(self) -> tuple[tuple[int, int], ...]: ...

    @property
    def measures(self) -> bool: ...


ProgramT = TypeVar("ProgramT", bound=Compiled)


class Simulator(Generic[ProgramT]):
    """A local backend that simulates circuits exactly and samples counts with a seed."""

    #: the ``method`` recorded in every result, and the adapter name.
    method: ClassVar[str]
    #: changes whenever the numbers a given seed produces could change.
    kernel_version: ClassVar[str]
    #: short tag in ``info.version`` (``<jobkeeper version>+<tag><kernel version>``).
    version_tag: ClassVar[str]
    description: ClassVar[str]
    #: qubits of the state per circuit qubit (a density matrix has 2n).
    entry_qubits: ClassVar[int] = 1
    #: gates per fused pass over the state, for estimates (a 20-qubit depth-20 random
    #: circuit: 590 gates in 50 passes).
    gates_per_pass: ClassVar[float] = 12.0

    name: str
    config: dict[str, Any]
    max_qubits: int
    max_memory_bytes: int | None
    max_branches: int
    fusion_width: int
    pricing: Pricing | None = None

    def _set_limits(self, name: str, config: dict[str, Any], options: SimulatorOptions) -> None:
        self.name = name
        self.config = config
        self.max_qubits = options.max_qubits
        self.max_memory_bytes = options.max_memory_bytes
        self.max_branches = options.max_branches
        self.fusion_width = options.fusion_width

    # -- what a subclass supplies ---------------------------------------------------------

    def compile(self, circuit: Circuit) -> ProgramT:
        """The circuit as a program, checked against the limits (nothing allocated)."""
        raise NotImplementedError

    def outcome_weights(self, program: ProgramT) -> tuple[dict[int, Floats], dict[str, Any]]:
        """Exact outcome weights per classical record, each a vector over the final
        measurements' outcomes (summing to the record's probability); and metadata of
        the run to add to the result."""
        raise NotImplementedError

    def footprint(self, num_qubits: int, states: int) -> tuple[int, str]:
        """Bytes ``states`` states of ``num_qubits`` qubits need, and how that adds up."""
        raise NotImplementedError

    def qubits_that_fit(self, limit: int) -> int:
        raise NotImplementedError

    def calibration(self) -> Mapping[str, Any] | None:
        return None

    # -- the description and the limits ---------------------------------------------------

    @property
    def info(self) -> BackendInfo:
        return BackendInfo(
            name=self.name,
            kind="simulator",
            version=f"{__version__}+{self.version_tag}{self.kernel_version}",
            max_qubits=min(self.max_qubits, self.qubits_that_fit(self.memory_limit())),
            mid_circuit_measurement=True,
            deterministic=True,
            pricing=self.pricing,
            calibration=self.calibration(),
            config_hash=digest_of(self.config),
            description=self.description,
        )

    def memory_limit(self) -> int:
        """Bytes a run may use: the configured limit, capped by what the system has."""
        limit = available_memory()
        if self.max_memory_bytes is not None:
            limit = min(limit, self.max_memory_bytes)
        return limit

    def check_memory(self, num_qubits: int, states: int = 1) -> None:
        """PermanentBackendError unless ``states`` states of ``num_qubits`` fit the
        limits; called before anything is allocated."""
        needed, arithmetic = self.footprint(num_qubits, states)
        if num_qubits > self.max_qubits:
            raise PermanentBackendError(
                f"{num_qubits} qubits exceed this backend's max_qubits ({self.max_qubits}): "
                f"they need {needed} bytes ({arithmetic})"
            )
        limit = self.memory_limit()
        if needed > limit:
            raise PermanentBackendError(
                f"{num_qubits} qubits need {needed} bytes ({arithmetic}), more than the "
                f"{limit} bytes available"
            )

    def simulation_plan(self, circuit: Circuit, shots: int) -> dict[str, Any]:
        """Pre-flight's view of a run: the method, the bytes it needs against those
        available, and a rough CPU time (None when it does not fit): estimated fused
        passes over the state × entries × a rate measured on the development machine.
        Nothing is compiled (a long circuit's compilation is itself a cost)."""
        needed, arithmetic = self.footprint(circuit.num_qubits, 1)
        plan: dict[str, Any] = {
            "method": self.method,
            "memory_bytes": needed,
            "memory_arithmetic": arithmetic,
            "available_bytes": self.memory_limit(),
            "seconds": None,
        }
        if needed <= plan["available_bytes"] and circuit.num_qubits <= self.max_qubits:
            gates = sum(op.name not in NON_GATE_OPERATIONS for op in circuit.operations)
            entries = 1 << (self.entry_qubits * circuit.num_qubits)
            plan["seconds"] = estimated_seconds(max(1.0, gates / self.gates_per_pass), entries)
        return plan

    def too_many_branches(self, what: str) -> PermanentBackendError:
        return PermanentBackendError(
            f"the circuit splits into more than {self.max_branches} {what}; raise "
            "max_branches or measure at the end"
        )

    # -- the run ----------------------------------------------------------------------------

    def execute(self, task: Task) -> Result:
        """Run ``task`` to completion; raises only PermanentBackendError."""
        if task.shots < 0:
            raise PermanentBackendError(f"shots must not be negative, got {task.shots}")
        if task.seed is not None and task.seed < 0:
            raise PermanentBackendError(f"a seed must not be negative, got {task.seed}")
        circuit = task.circuit
        program = self.compile(circuit)
        seed = task.seed if task.seed is not None else secrets.randbits(63)
        try:
            weights, details = self.outcome_weights(program)
        except MemoryError as exc:
            raise PermanentBackendError(
                f"ran out of memory simulating {circuit.num_qubits} qubits"
            ) from exc
        formatter = BitFormatter(circuit.cregs, circuit.num_clbits, [c for _, c in program.final])
        rng = np.random.Generator(np.random.PCG64(seed))
        ordered = sorted(weights.items())
        del weights
        counts = sample_counts(rng, task.shots, ordered, formatter)
        probabilities: dict[str, float] | None = None
        if task.exact:
            probabilities = {}
            for record, probs in ordered:
                probabilities_of(formatter, record, probs, probabilities)
        metadata = self.run_metadata(seed, task.shots, len(ordered), program.measures, details)
        return Result(counts=counts, probabilities=probabilities, metadata=metadata)

    def run_metadata(
        self, seed: int, shots: int, records: int, measures: bool, details: Mapping[str, Any]
    ) -> dict[str, Any]:
        """What a result says about its run (a batch's points say the same)."""
        metadata: dict[str, Any] = {
            "seed": str(seed),
            "method": self.method,
            "kernel_version": self.kernel_version,
            "numpy_version": np.__version__,
            "shots": shots,
            "classical_records": records,
            "measured": measures,
            "sampling": SAMPLING,
            **details,
        }
        if not measures:
            metadata["note"] = "the circuit measures nothing: every classical bit reads 0"
        return metadata

    # -- batches (jobkeeper.backend.BatchBackend) --------------------------------------------

    def run_batch(self, template: Template, points: Sequence[BatchPoint]) -> list[Result]:
        """Each point bound (fast, one trace per template) and run as a single job
        would run it; the state-vector simulator vectorises (see :mod:`.batch`)."""
        return run_one_by_one(self, bind_points(template, points), points)

    # -- the asynchronous side: finished inside start -------------------------------------

    async def start(self, task: Task, *, client_key: str) -> Started:
        return Started(result=self.execute(task))

    async def poll(self, handle: str) -> Polled:
        raise PermanentBackendError(self._no_handle(handle))

    async def cancel(self, handle: str) -> None:
        raise PermanentBackendError(self._no_handle(handle))

    async def aclose(self) -> None:
        return None

    def _no_handle(self, handle: str) -> str:
        return f"backend {self.name!r} finishes inside start: there is no handle {handle!r}"
