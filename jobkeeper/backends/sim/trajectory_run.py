"""Running noisy trajectories, spending the work where the errors are.

Method: the noise is unravelled into pure-state trajectories. Pauli channels
(depolarizing, dephasing) are mixtures of unitaries, so each trajectory draws its Pauli
errors in advance, independently of the state (stochastic Pauli insertion).
Amplitude damping is unravelled into quantum jumps (Dalibard, Castin & Mølmer, Phys.
Rev. Lett. 68, 580 (1992)): at a damping site with γ the state jumps by
K1 = √γ |0⟩⟨1| with probability γ·P(1), and otherwise takes K0 = diag(1, √(1−γ)),
renormalised. The jump is drawn by thinning, which makes its *candidates* independent
of the state too: a candidate with probability γ (drawn in advance), accepted with
probability P(1) read off the state there, so that a jump has probability γ·P(1), and a
rejected candidate leaves the state exactly as no candidate would (K0 either way).

So every trajectory's events are known before it runs, and the work follows them:

* one *quiet* run (no event: gates, and K0 at each damping site, unnormalised) is shared
  by every trajectory until its first event; trajectories are grouped by that first
  event and each continues from a copy of the quiet state taken there;
* a rejected candidate on the quiet run is decided once for all trajectories that meet
  it there (P(1) is the quiet state's), and they stay on the quiet run;
* between events a trajectory applies the same fused blocks as a noiseless run; a block
  with an event inside is rebuilt with the event spliced in (still one pass), and a
  damping candidate splits its block where the state must be read;
* trajectories without any event share the quiet run's final state.

Memory: the quiet state and one working copy (2 × 16 bytes per amplitude), and the
outcome probabilities of one trajectory at a time (8 bytes per amplitude).

Randomness (so that results can be reproduced): trajectory t has its own generator,
``PCG64(SeedSequence(seed, spawn_key=(t,)))``, and draws, in order: one uniform per site
(an event where it falls below the site's probability), one uniform per event (which
Pauli product, uniformly among the non-identity ones, or a candidate's acceptance), two
uniforms per mid-circuit measurement or reset met (outcome, readout flip), then for its
k shots k uniforms (the outcomes, by inverting the cumulative distribution in outcome
order) and, when any readout error is set, k × m uniforms (the flip of each of the m
measured bits). The draws of a trajectory do not depend on how trajectories are grouped.
"""

from __future__ import annotations

import heapq
from dataclasses import dataclass, field

import numpy as np

from jobkeeper.backends.sim import kernels
from jobkeeper.backends.sim.base import holds
from jobkeeper.backends.sim.gates import Matrix
from jobkeeper.backends.sim.noise import NoiseModel
from jobkeeper.backends.sim.program import Measure, Reset
from jobkeeper.backends.sim.sampling import marginal
from jobkeeper.backends.sim.statevector import _collapse, initial_state
from jobkeeper.backends.sim.trajectory_program import (
    DAMP,
    DEPHASE,
    PAULI_1Q,
    Floats,
    Ints,
    NoisyBlock,
    Segment,
    TrajectoryProgram,
    jump,
    no_jump,
    pauli,
)

_X = pauli(1, 1)


@dataclass(slots=True)
class Trajectory:
    index: int
    shots: int
    rng: np.random.Generator
    sites: list[int]
    values: list[float]
    ptr: int = 0
    record: int = 0
    outcomes: Ints = field(default_factory=lambda: np.zeros(0, dtype=np.int64))

    def next_site(self) -> int:
        return self.sites[self.ptr] if self.ptr < len(self.sites) else -1


def _mul(a: Matrix | None, b: Matrix | None) -> Matrix | None:
    """a · b, None standing for the identity."""
    if a is None:
        return b
    if b is None:
        return a
    return np.asarray(a @ b, dtype=np.complex128)


def _norm2(state: kernels.State) -> float:
    return float(np.vdot(state, state).real)


class Runner:
    """Runs the trajectories of one task (see the module docstring)."""

    def __init__(self, program: TrajectoryProgram, noise: NoiseModel, shots: list[int], seed: int):
        self.program = program
        self.n = program.num_qubits
        self.final_qubits = [q for q, _ in program.final]
        self.errors = np.array([noise.readout(q) for q in self.final_qubits], dtype=np.float64)
        self.noise = noise
        self.trajectories = [
            self._draw(t, k, seed) for t, k in enumerate(shots)
        ]  # fmt: skip
        #: segment ranges of sites, to skip a segment's events when its condition fails.
        self.segment_sites: list[tuple[int, int]] = []
        for step in program.steps:
            if isinstance(step, Segment) and step.blocks:
                last = step.blocks[-1]
                self.segment_sites.append(
                    (step.blocks[0].first_site, last.first_site + last.num_sites)
                )
            else:
                self.segment_sites.append((0, 0))
        self.diverged = 0
        self._work: kernels.State | None = None

    def _draw(self, t: int, shots: int, seed: int) -> Trajectory:
        rng = np.random.Generator(np.random.PCG64(np.random.SeedSequence(seed, spawn_key=(t,))))
        probability = self.program.site_probability
        hits = np.flatnonzero(rng.random(len(probability)) < probability)
        values = rng.random(len(hits))
        return Trajectory(t, shots, rng, hits.tolist(), values.tolist())

    # -- the quiet run ------------------------------------------------------------------

    def run(self) -> list[Trajectory]:
        """Every trajectory run and sampled (its ``record`` and ``outcomes`` set)."""
        steps = self.program.steps
        quiet = initial_state(self.n)
        waiting = [(t.next_site(), t.index) for t in self.trajectories if t.sites]
        heapq.heapify(waiting)
        calm = [t for t in self.trajectories if not t.sites]
        index = 0
        while index < len(steps):
            step = steps[index]
            if not isinstance(step, Segment):
                break
            if step.condition is not None and not holds(step.condition, 0):
                self._skip_quiet(waiting, calm, self.segment_sites[index][1])
            else:
                for b, block in enumerate(step.blocks):
                    self._quiet_block(quiet, block, index, b, waiting, calm)
            index += 1
        rest = calm + [self.trajectories[t] for _, t in waiting]
        if index == len(steps):
            # No event left: these trajectories end in the quiet state itself.
            cdf = self._cdf(quiet)
            for t in rest:
                self._sample(t, cdf)
            return self.trajectories
        for t in sorted(rest, key=lambda t: t.index):
            work = self._copy(quiet)
            self._tail(work, t, index, 0, 0)
        return self.trajectories

    def _skip_quiet(self, waiting: list[tuple[int, int]], calm: list[Trajectory], end: int) -> None:
        while waiting and waiting[0][0] < end:
            _, i = heapq.heappop(waiting)
            t = self.trajectories[i]
            while t.ptr < len(t.sites) and t.sites[t.ptr] < end:
                t.ptr += 1
            self._requeue(t, waiting, calm)

    def _requeue(
        self, t: Trajectory, waiting: list[tuple[int, int]], calm: list[Trajectory]
    ) -> None:
        site = t.next_site()
        if site < 0:
            calm.append(t)
        else:
            heapq.heappush(waiting, (site, t.index))

    def _quiet_block(
        self,
        quiet: kernels.State,
        block: NoisyBlock,
        step: int,
        b: int,
        waiting: list[tuple[int, int]],
        calm: list[Trajectory],
    ) -> None:
        end = block.first_site + block.num_sites
        if not waiting or waiting[0][0] >= end:
            kernels.apply(quiet, self.n, block.matrix, block.qubits, block.kind)
            return
        done = 0
        while waiting and waiting[0][0] < end:
            site = waiting[0][0]
            group: list[Trajectory] = []
            while waiting and waiting[0][0] == site:
                group.append(self.trajectories[heapq.heappop(waiting)[1]])
            j = block.site_items[site - block.first_site]
            self._apply(quiet, block, block.product(done, j))
            done = j
            if self.program.site_kind[site] == DAMP:
                p1 = self._p1(quiet, block.items[j].qubits[0])
                for t in group:
                    if t.values[t.ptr] < p1:
                        self._diverge(quiet, t, step, b, j)
                    else:
                        t.ptr += 1
                        self._requeue(t, waiting, calm)
            else:
                for t in group:
                    self._diverge(quiet, t, step, b, j)
        self._apply(quiet, block, block.product(done, len(block.items)))

    def _diverge(self, quiet: kernels.State, t: Trajectory, step: int, b: int, item: int) -> None:
        self.diverged += 1
        self._tail(self._copy(quiet), t, step, b, item)

    def _copy(self, quiet: kernels.State) -> kernels.State:
        if self._work is None:
            self._work = np.empty_like(quiet)
        np.copyto(self._work, quiet)
        return self._work

    # -- one trajectory on its own ------------------------------------------------------

    def _tail(self, state: kernels.State, t: Trajectory, step: int, b: int, item: int) -> None:
        """Run ``t`` from block ``b``, item ``item`` of step ``step`` to the end, and
        sample its shots."""
        steps = self.program.steps
        for index in range(step, len(steps)):
            s = steps[index]
            if isinstance(s, Segment):
                if s.condition is not None and not holds(s.condition, t.record):
                    end = self.segment_sites[index][1]
                    while t.ptr < len(t.sites) and t.sites[t.ptr] < end:
                        t.ptr += 1
                    continue
                for block in s.blocks[b:]:
                    self._tail_block(state, t, block, item)
                    item = 0
                b = 0
            else:
                self._read(state, t, s)
        self._sample(t, self._cdf(state))

    def _tail_block(
        self, state: kernels.State, t: Trajectory, block: NoisyBlock, start: int
    ) -> None:
        end = block.first_site + block.num_sites
        if start == 0 and (t.ptr >= len(t.sites) or t.sites[t.ptr] >= end):
            kernels.apply(state, self.n, block.matrix, block.qubits, block.kind)
            return
        done, pending = start, None
        kinds = self.program.site_kind
        while t.ptr < len(t.sites) and t.sites[t.ptr] < end:
            site, value = t.sites[t.ptr], t.values[t.ptr]
            t.ptr += 1
            j = block.site_items[site - block.first_site]
            pending = _mul(block.product(done, j), pending)
            qubits = block.items[j].qubits
            kind = int(kinds[site])
            if kind == DAMP:
                self._apply(state, block, pending)
                pending = None
                norm2 = _norm2(state)
                p1 = self._p1(state, qubits[0], norm2)
                gamma = float(self.program.site_gamma[site])
                if value < p1:
                    k = jump(gamma) / np.sqrt(gamma * p1 * norm2)
                else:
                    k = no_jump(gamma) / np.sqrt((1.0 - gamma * p1) * norm2)
                pending = block.embed(qubits, k)
            else:
                if kind == DEPHASE:
                    which = 3
                elif kind == PAULI_1Q:
                    which = 1 + int(value * 3)
                else:
                    which = 1 + int(value * 15)
                pending = _mul(block.embed(qubits, pauli(which, len(qubits))), pending)
            done = j + 1
        self._apply(state, block, _mul(block.product(done, len(block.items)), pending))

    def _apply(self, state: kernels.State, block: NoisyBlock, matrix: Matrix | None) -> None:
        # A rebuilt piece is dense (an event mixes it); classifying costs more than a
        # small pass.
        if matrix is None:
            return
        if len(block.qubits) == self.n:
            # On every qubit: one product with the state (small circuits are one block).
            ordered, _ = kernels.reorder(matrix, block.qubits)
            state[...] = ordered @ state
        else:
            kernels.apply_dense(state, self.n, matrix, block.qubits)

    def _p1(self, state: kernels.State, qubit: int, norm2: float | None = None) -> float:
        if norm2 is None:
            norm2 = _norm2(state)
        return min(1.0, kernels.probability_of_one(state, self.n, qubit) / norm2)

    def _read(self, state: kernels.State, t: Trajectory, step: Measure | Reset) -> None:
        """A mid-circuit measurement or reset on trajectory ``t``."""
        if step.condition is not None and not holds(step.condition, t.record):
            return
        norm2 = _norm2(state)
        p1 = self._p1(state, step.qubit, norm2)
        outcome = int(t.rng.random() < p1)
        flip = int(t.rng.random() < self.noise.readout(step.qubit))
        _collapse(state, self.n, step, outcome, (p1 if outcome else 1.0 - p1) * norm2)
        if isinstance(step, Reset):
            # Measured, then X when it reads 1: the qubit ends as the flip left it.
            if flip:
                kernels.apply(state, self.n, _X, (step.qubit,), "monomial")
            return
        bit = 1 << step.clbit
        t.record = t.record | bit if outcome ^ flip else t.record & ~bit

    # -- sampling -----------------------------------------------------------------------

    def _cdf(self, state: kernels.State) -> Floats:
        """The cumulative distribution of the final readings (unnormalised)."""
        qubits = self.final_qubits
        if len(qubits) == self.n and all(q == j for j, q in enumerate(qubits)):
            floats = state.view(np.float64).reshape(-1, 2)
            probs: Floats = np.einsum("ij,ij->i", floats, floats)
        else:
            probs = marginal(state, self.n, qubits)
        np.cumsum(probs, out=probs)
        return probs

    def _sample(self, t: Trajectory, cdf: Floats) -> None:
        u = t.rng.random(t.shots) * cdf[-1]
        outcomes = np.minimum(np.searchsorted(cdf, u, side="right"), len(cdf) - 1)
        if self.errors.any():
            flips = t.rng.random((t.shots, len(self.errors))) < self.errors
            weights = np.left_shift(1, np.arange(len(self.errors), dtype=np.int64))
            outcomes = outcomes ^ (flips.astype(np.int64) @ weights)
        t.outcomes = outcomes.astype(np.int64, copy=False)
