"""A circuit compiled for the trajectory simulator: gates fused into blocks as for a
noiseless run, with every place where noise may strike (a *site*) kept inside its block.

A site is where the noise model (:mod:`.noise`) puts a channel after a gate:

* ``PAULI_1Q`` / ``PAULI_2Q``: depolarizing, one of the 3 (15) non-identity Pauli
  products with probability p, uniformly;
* ``DEPHASE``: a Z with the phase-flip probability of the gate's duration;
* ``DAMP``: amplitude damping γ of the gate's duration, unravelled into quantum jumps.

Pauli sites are identities in the error-free ("quiet") evolution. A damping site is
its no-jump Kraus operator K0 = diag(1, √(1−γ)) there: a contraction, so the quiet
state's norm² falls by the probability of a jump. Sites are numbered in the order the
blocks apply them, so a trajectory's events sorted by site are in the order it meets
them; a block with an event inside is rebuilt with the event's matrix spliced in after
its site (:meth:`NoisyBlock.product`), so the work between events stays one fused pass
per block.

Steps are as in the other programs (:mod:`.program`): final measurements are read off
the end (after a ``DAMP`` site for the readout time on each measured qubit), and each
mid-circuit measurement and reset is a step of its own, preceded by its readout-time
damping.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
import numpy.typing as npt

from jobkeeper.backends.sim.density_program import primitives
from jobkeeper.backends.sim.fusion import distinct
from jobkeeper.backends.sim.gates import Matrix, embed, gate_matrix
from jobkeeper.backends.sim.kernels import classify
from jobkeeper.backends.sim.noise import NoiseModel
from jobkeeper.backends.sim.program import (
    IDENTITY_GATES,
    Measure,
    Reset,
    outline,
)
from jobkeeper.circuit.ir import MEASURE, RESET, Circuit, Condition

PAULI_1Q, PAULI_2Q, DEPHASE, DAMP = 0, 1, 2, 3
#: widest fused block, in qubits: the state-vector simulator's own default, so the work
#: between errors is what a noiseless run does.
DEFAULT_MAX_WIDTH = 5

_PAULI = (
    np.eye(2, dtype=np.complex128),
    np.array([[0, 1], [1, 0]], dtype=np.complex128),
    np.array([[0, -1j], [1j, 0]], dtype=np.complex128),
    np.array([[1, 0], [0, -1]], dtype=np.complex128),
)


@lru_cache(maxsize=32)
def pauli(index: int, arity: int) -> Matrix:
    """Pauli product ``index`` (base 4, first qubit most significant; 0 = I, 1 = X,
    2 = Y, 3 = Z) on ``arity`` qubits."""
    if arity == 1:
        return _PAULI[index]
    return np.asarray(np.kron(_PAULI[index >> 2], _PAULI[index & 3]), dtype=np.complex128)


def no_jump(gamma: float) -> Matrix:
    return np.array([[1, 0], [0, np.sqrt(1.0 - gamma)]], dtype=np.complex128)


def jump(gamma: float) -> Matrix:
    return np.array([[0, np.sqrt(gamma)], [0, 0]], dtype=np.complex128)


@dataclass(frozen=True, slots=True)
class Item:
    """One entry of a block: a gate (``site`` −1), a Pauli site (``matrix`` None) or a
    damping site (``matrix`` its K0), on qubits of the register."""

    qubits: tuple[int, ...]
    matrix: Matrix | None
    site: int = -1


@dataclass(slots=True)
class NoisyBlock:
    """Items fused into one matrix on ``qubits`` (first most significant)."""

    qubits: tuple[int, ...]
    items: tuple[Item, ...]
    matrix: Matrix
    kind: str
    #: global number of the block's first site and how many it holds.
    first_site: int = 0
    num_sites: int = 0
    #: item index of each of the block's sites, in site order.
    site_items: tuple[int, ...] = ()
    _embedded: list[Matrix | None] = field(default_factory=list)

    def embedded(self, index: int) -> Matrix | None:
        """Item ``index`` as a matrix on the whole block (None: the identity)."""
        if not self._embedded:
            self._embedded = [None] * len(self.items)
            for i, item in enumerate(self.items):
                if item.matrix is not None:
                    self._embedded[i] = self.embed(item.qubits, item.matrix)
        return self._embedded[index]

    def embed(self, qubits: tuple[int, ...], matrix: Matrix) -> Matrix:
        return embed(matrix, tuple(self.qubits.index(q) for q in qubits), len(self.qubits))

    def product(self, start: int, stop: int) -> Matrix | None:
        """The product of items ``start`` to ``stop`` − 1, in order (None: identity)."""
        if start == 0 and stop == len(self.items):
            return self.matrix
        out: Matrix | None = None
        for i in range(start, stop):
            m = self.embedded(i)
            if m is not None:
                out = m if out is None else m @ out
        return out


@dataclass(frozen=True, slots=True)
class Segment:
    """Blocks applied in order (only on records where ``condition`` holds)."""

    blocks: tuple[NoisyBlock, ...]
    condition: Condition | None = None


Step = Segment | Measure | Reset
Floats = npt.NDArray[np.float64]
Ints = npt.NDArray[np.int64]


@dataclass(frozen=True, slots=True)
class TrajectoryProgram:
    num_qubits: int
    steps: tuple[Step, ...]
    #: (qubit, clbit) of the final measurements, in ascending clbit order.
    final: tuple[tuple[int, int], ...]
    measures: bool
    #: per site: kind, probability of an event (for DAMP, of a jump *candidate*: γ), γ.
    site_kind: Ints
    site_probability: Floats
    site_gamma: Floats
    #: operations run, by arity (1, 2, wider).
    operations: tuple[int, int, int]


class _Open:
    __slots__ = ("items", "qubits")

    def __init__(self, qubits: list[int], items: list[Item]):
        self.qubits = qubits
        self.items = items


def fuse_items(items: list[Item], max_width: int) -> list[tuple[tuple[int, ...], list[Item]]]:
    """Group ``items`` into blocks of at most ``max_width`` qubits, in an order that
    keeps the circuit's meaning: the state-vector fuser's rule (:mod:`.fusion`), with
    the items kept so a block can be rebuilt with events spliced in."""
    every = sorted({q for it in items for q in it.qubits}, reverse=True)
    if len(every) <= max_width:
        return [(tuple(every), list(items))]
    out: list[tuple[tuple[int, ...], list[Item]]] = []
    open_on: dict[int, _Open] = {}

    def emit(blk: _Open) -> None:
        for q in blk.qubits:
            del open_on[q]
        out.append((tuple(blk.qubits), blk.items))

    for item in items:
        touched: list[_Open] = []
        for q in item.qubits:
            blk = open_on.get(q)
            if blk is not None and all(blk is not t for t in touched):
                touched.append(blk)
        touched.sort(key=lambda b: len(b.qubits), reverse=True)
        width = max(max_width, len(item.qubits))
        while len(set(item.qubits).union(*(b.qubits for b in touched))) > width:
            emit(touched.pop(0))
        merged = _Open([], [])
        for blk in touched:
            merged.qubits += blk.qubits
            merged.items += blk.items
            for q in blk.qubits:
                del open_on[q]
        merged.qubits += [q for q in item.qubits if q not in merged.qubits]
        merged.items.append(item)
        for q in merged.qubits:
            open_on[q] = merged
    out.extend((tuple(blk.qubits), blk.items) for blk in distinct(open_on.values()))
    return out


class _Sites:
    def __init__(self) -> None:
        self.kind: list[int] = []
        self.probability: list[float] = []
        self.gamma: list[float] = []

    def add(self, kind: int, probability: float, gamma: float = 0.0) -> int:
        self.kind.append(kind)
        self.probability.append(probability)
        self.gamma.append(gamma)
        return len(self.kind) - 1


def _noise_items(
    qubits: tuple[int, ...], duration: float, depolarizing: float, noise: NoiseModel
) -> list[tuple[Item, int, float, float]]:
    """The noise after a gate, as (item, kind, probability, γ): depolarizing, then per
    qubit damping and dephasing (the density-matrix program's order)."""
    out: list[tuple[Item, int, float, float]] = []
    if depolarizing > 0 and len(qubits) <= 2:
        kind = PAULI_1Q if len(qubits) == 1 else PAULI_2Q
        out.append((Item(qubits, None), kind, depolarizing, 0.0))
    if noise.relaxation and duration > 0:
        for q in qubits:
            gamma, flip = noise.decay(q, duration)
            if gamma > 0:
                out.append((Item((q,), no_jump(gamma)), DAMP, gamma, gamma))
            if flip > 0:
                out.append((Item((q,), None), DEPHASE, flip, 0.0))
    return out


def _finish_segment(
    raw: list[tuple[Item, int, float, float]], max_width: int, sites: _Sites
) -> tuple[NoisyBlock, ...]:
    """Fuse, then number the sites in the order the blocks apply them."""
    info = {id(item): (kind, p, g) for item, kind, p, g in raw if kind >= 0}
    blocks: list[NoisyBlock] = []
    for qubits, items in fuse_items([item for item, *_ in raw], max_width):
        numbered: list[Item] = []
        site_items: list[int] = []
        first = len(sites.kind)
        for index, item in enumerate(items):
            if id(item) in info:
                kind, p, g = info[id(item)]
                item = Item(item.qubits, item.matrix, sites.add(kind, p, g))
                site_items.append(index)
            numbered.append(item)
        block = NoisyBlock(qubits, tuple(numbered), np.eye(1, dtype=np.complex128), "identity")
        matrix = None
        for index in range(len(numbered)):
            m = block.embedded(index)
            if m is not None:
                matrix = m if matrix is None else m @ matrix
        if matrix is None:
            matrix = np.eye(1 << len(qubits), dtype=np.complex128)
        block.matrix = matrix
        block.kind = classify(matrix)
        block.first_site, block.num_sites = first, len(site_items)
        block.site_items = tuple(site_items)
        blocks.append(block)
    return tuple(blocks)


def compile_trajectories(
    circuit: Circuit, noise: NoiseModel, max_width: int = DEFAULT_MAX_WIDTH
) -> TrajectoryProgram:
    """Validate ``circuit`` (PermanentBackendError naming the first operation that cannot
    be simulated) and compile it with its noise sites."""
    plan = outline(circuit)
    sites = _Sites()
    steps: list[Step] = []
    pending: list[tuple[Item, int, float, float]] = []
    condition: list[Condition | None] = [None]
    counts = [0, 0, 0]

    def flush() -> None:
        if pending:
            steps.append(Segment(_finish_segment(pending, max_width, sites), condition[0]))
            pending.clear()

    def gate(qubits: tuple[int, ...], matrix: Matrix | None, duration: float) -> None:
        counts[min(len(qubits), 3) - 1] += 1
        if matrix is not None:
            pending.append((Item(qubits, matrix), -1, 0.0, 0.0))
        p = noise.depolarizing_1q if len(qubits) == 1 else noise.depolarizing_2q
        pending.extend(_noise_items(qubits, duration, p, noise))

    readout_time = noise.gate_time("readout")
    for op in plan.body:
        if op.condition != condition[0]:
            flush()
            condition[0] = op.condition
        if op.name in (MEASURE, RESET):
            # Decay while the qubit is read, then the reading.
            pending.extend(_noise_items(op.qubits, readout_time, 0.0, noise))
            flush()
            if op.name == MEASURE:
                steps.append(Measure(op.qubits[0], op.clbits[0], op.condition))
            else:
                steps.append(Reset(op.qubits[0], op.condition))
            continue
        if len(op.qubits) >= 3 and noise.gate_noise:
            for qubits, matrix in primitives(op.name, op.params, op.qubits):
                gate(qubits, matrix, noise.gate_time(len(qubits)))
            continue
        identity = op.name in IDENTITY_GATES
        duration = noise.gate_time("id" if identity else len(op.qubits))
        gate(op.qubits, None if identity else gate_matrix(op.name, op.params), duration)
    if condition[0] is not None:
        flush()
        condition[0] = None
    for qubit, _ in sorted(plan.final):
        pending.extend(_noise_items((qubit,), readout_time, 0.0, noise))
    flush()
    return TrajectoryProgram(
        num_qubits=circuit.num_qubits,
        steps=tuple(steps),
        final=plan.final,
        measures=plan.measures,
        site_kind=np.array(sites.kind, dtype=np.int64),
        site_probability=np.array(sites.probability, dtype=np.float64),
        site_gamma=np.array(sites.gamma, dtype=np.float64),
        operations=(counts[0], counts[1], counts[2]),
    )
