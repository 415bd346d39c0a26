"""Running the points of one template as a batch (DESIGN §7): bound once each (fast, see
:mod:`jobkeeper.circuit.qasm3.compiled`), simulated together where the circuit is small,
sampled each with its own seed.

What a point gets never depends on its batch: its counts are drawn by the same code a
single job uses (:func:`~jobkeeper.backends.sim.sampling.draw` on a
``Generator(PCG64(seed))``, the bit strings laid out by the same
:class:`~jobkeeper.backends.sim.sampling.BitFormatter`), from probabilities computed for
that point alone:

- the state-vector simulator evolves the points of one circuit shape together when the
  shape is small (at most :data:`VECTOR_QUBITS` qubits, gates then final measurements
  only, no backend options): :mod:`.batch_kernels`, whose arithmetic per point is the
  same whatever the batch (bit-identical states across batch sizes and orders, tested);
- every other point, and every point of another simulator, runs as a single job would:
  the simulator's own ``execute`` on the bound circuit.

The vectorised evolution applies the gates one by one where a single job fuses them into
blocks first, so the two agree to rounding (about 1e-16), not bit for bit. Sampling
rounds probabilities to 13 decimal places before drawing (:mod:`.sampling`), so the
counts agree unless a probability lies within that rounding of a boundary of the
13-decimal grid *and* the draw falls on the boundary it moves: tests hold batch and
single counts equal for the same seed. A vectorised point's result says so (``evolution``).
"""

from __future__ import annotations

import secrets
from collections.abc import Mapping, Sequence
from typing import Any, Protocol

import numpy as np

from jobkeeper.backend import BatchPoint, Result, Task
from jobkeeper.backends.sim.batch_kernels import States, gate_parts
from jobkeeper.backends.sim.batch_points import Group, group_points
from jobkeeper.backends.sim.program import IDENTITY_GATES, Outline, final_measurements, outline
from jobkeeper.backends.sim.sampling import BitFormatter, draw, probabilities_of
from jobkeeper.circuit.ir import BARRIER, MEASURE, RESET, Circuit
from jobkeeper.circuit.qasm3.template import BoundPoint, Template
from jobkeeper.exceptions import CircuitError, PermanentBackendError
from jobkeeper.hashing import sha256_tag

#: widest circuit evolved for many points at once; wider ones run point by point (their
#: state alone is large enough to keep numpy busy).
VECTOR_QUBITS = 12
#: amplitudes per chunk of points evolved together (two float64 arrays of this many
#: entries, 2 MiB each: within a core's cache on most machines).
CHUNK_AMPLITUDES = 1 << 18
#: what a vectorised point's result says of its evolution (a point run alone says
#: nothing: its result is a single job's).
EVOLUTION_VECTORISED = "vectorised over points, gate by gate (jobkeeper.backends.sim.batch)"


class Runner(Protocol):
    """What a batch needs of a simulator (:class:`.base.Simulator` has it all)."""

    def execute(self, task: Task) -> Result: ...

    def check_memory(self, num_qubits: int, states: int = 1) -> None: ...

    def run_metadata(
        self, seed: int, shots: int, records: int, measures: bool, details: Mapping[str, Any]
    ) -> dict[str, Any]: ...


def bind_points(template: Template, points: Sequence[BatchPoint]) -> list[BoundPoint]:
    """Each point bound; PermanentBackendError naming the point whose values do not
    bind, or whose circuit is not the one its job names (``circuit_hash``)."""
    check = any(point.circuit_hash is not None for point in points)
    try:
        bound = template.bind_many([point.values for point in points], text=check)
    except CircuitError as exc:
        raise PermanentBackendError(f"a point does not bind: {exc}") from exc
    for index, (point, one) in enumerate(zip(points, bound, strict=True)):
        if point.circuit_hash is not None and sha256_tag(one.text.encode()) != point.circuit_hash:
            raise PermanentBackendError(
                f"point {index}: the bound circuit is not the circuit of its job "
                f"({point.circuit_hash})"
            )
    return bound


def run_one_by_one(
    simulator: Runner, bound: Sequence[BoundPoint], points: Sequence[BatchPoint]
) -> list[Result]:
    """Each point as a single job: the simulator's own ``execute``."""
    return [
        simulator.execute(
            Task(circuit=one.circuit, shots=point.shots, seed=point.seed, exact=point.exact)
        )
        for one, point in zip(bound, points, strict=True)
    ]


def _vectorisable(plan: Outline, circuit: Circuit) -> bool:
    if circuit.num_qubits > VECTOR_QUBITS or circuit.opaque:
        return False
    return all(op.name not in (MEASURE, RESET) and op.condition is None for op in plan.body)


def run_statevector_batch(
    simulator: Runner, template: Template, points: Sequence[BatchPoint]
) -> list[Result]:
    """The state-vector simulator's batch (see the module docstring)."""
    _check_points(points)
    results: list[Result | None] = [None] * len(points)
    for group in group_points(template, points):
        first = group.first
        plan = outline(first)  # validates the shape: the same for every member
        ks = range(len(group.members))
        if not _vectorisable(plan, first):
            for k in ks:
                point = points[group.members[k]]
                task = Task(group.circuit(k), point.shots, seed=point.seed, exact=point.exact)
                results[group.members[k]] = simulator.execute(task)
            continue
        simulator.check_memory(first.num_qubits)
        keys = _Keys(BitFormatter(first.cregs, first.num_clbits, [c for _, c in plan.final]))
        chunk = max(1, CHUNK_AMPLITUDES >> first.num_qubits)
        for start in range(0, len(ks), chunk):
            part = ks[start : start + chunk]
            states = evolve_group(group, part)
            probs = states.probabilities([q for q, _ in plan.final])
            for row, k in enumerate(part):
                i = group.members[k]
                results[i] = _sampled(simulator, plan, keys, probs[row], points[i])
    return [r for r in results if r is not None]


class _Keys:
    """Count keys of a shape's outcomes (record 0), each written once by the shape's
    formatter: what :func:`.sampling.counts_of_draws` writes, without writing the same
    bit string again for every point. (That function turns to a CountTable only past
    TABLE_FROM = 2^12 distinct outcomes, more than VECTOR_QUBITS qubits can give.)"""

    def __init__(self, formatter: BitFormatter):
        self.formatter = formatter
        self.known: dict[int, str] = {}

    def counts(self, drawn: Any) -> dict[str, int]:
        hit = np.flatnonzero(drawn)
        missing = [i for i in hit.tolist() if i not in self.known]
        if missing:
            written = self.formatter.format(0, np.array(missing, dtype=np.int64))
            self.known.update(zip(missing, written, strict=True))
        known = self.known
        return {known[i]: n for i, n in zip(hit.tolist(), drawn[hit].tolist(), strict=True)}


def evolve(circuits: Sequence[Circuit]) -> States:
    """The final states of ``circuits`` (bound points of one shape that only applies
    gates before its final measurements)."""
    group = Group(list(range(len(circuits))), circuits[0], None, circuits=list(circuits))
    return evolve_group(group, range(len(circuits)))


def evolve_group(group: Group, ks: Sequence[int]) -> States:
    """The final states of the group's points ``ks``."""
    first = group.first
    states = States(len(ks), first.num_qubits)
    for position in body_positions(first):
        op = first.operations[position]
        if op.name not in IDENTITY_GATES:
            states.apply(op.qubits, gate_parts(op.name, group.params(position, ks)))
    return states


def body_positions(circuit: Circuit) -> list[int]:
    """Indices of the operations a simulation applies: what :func:`.program.outline`
    keeps as the body (no barriers, no final measurements)."""
    final = final_measurements(circuit.operations)
    return [
        index
        for index, op in enumerate(circuit.operations)
        if op.name != BARRIER
        and not (op.name == MEASURE and op.condition is None and index in final)
    ]


def _sampled(
    simulator: Runner,
    plan: Outline,
    keys: _Keys,
    probs: Any,
    point: BatchPoint,
) -> Result:
    """One point's result, drawn as a single job draws it (base.Simulator.execute: one
    record, one :func:`.sampling.draw` on a fresh generator seeded with the point's
    seed)."""
    seed = point.seed if point.seed is not None else secrets.randbits(63)
    rng = np.random.Generator(np.random.PCG64(seed))
    probs = np.ascontiguousarray(probs)
    counts = keys.counts(draw(rng, point.shots, probs))
    probabilities: dict[str, float] | None = None
    if point.exact:
        probabilities = {}
        probabilities_of(keys.formatter, 0, probs, probabilities)
    metadata = simulator.run_metadata(seed, point.shots, 1, plan.measures, {"branches": 1})
    metadata["evolution"] = EVOLUTION_VECTORISED
    return Result(counts=counts, probabilities=probabilities, metadata=metadata)


def _check_points(points: Sequence[BatchPoint]) -> None:
    for index, point in enumerate(points):
        if point.shots < 0:
            raise PermanentBackendError(f"point {index}: shots must not be negative")
        if point.seed is not None and point.seed < 0:
            raise PermanentBackendError(f"point {index}: a seed must not be negative")
