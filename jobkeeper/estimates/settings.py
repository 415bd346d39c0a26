"""Measurement settings: which terms are measured together, and the circuit of each.

Grouping. Terms that commute qubit by qubit (on every qubit both name, they name the same
letter) are measured with one setting: rotate each named qubit into the Z basis and
measure it once. The groups are formed by sorted insertion (Crawford, Straaten, Wang,
Parks, Campbell, Brierley, "Efficient quantum measurement of Pauli operators in the
presence of finite sampling error", Quantum 5, 385 (2021)): terms in order of
decreasing |coefficient| (ties in canonical order), each into the first group it
commutes with qubit-wise, else a new group. ``grouping="none"`` measures each term on
its own (for comparison).

Circuits. Each setting is the preparation circuit with its final measurements dropped
(a note says so), then the basis change in qubit order (X: ``h``; Y: ``sdg`` then
``h``; Z: nothing), then one measurement per qubit the setting names, into ONE classical
register: the setting's qubits ascending are its bits 0, 1, ... so a count key is a
plain bit string whose rightmost character is the lowest qubit measured. A preparation
that measures a qubit mid-way (an operation after the measurement touches that qubit,
or a condition reads a bit) has no single state to estimate on and is refused.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Literal

from jobkeeper.circuit.ir import BARRIER, MEASURE, Circuit, Operation, Register
from jobkeeper.estimates.observable import Observable, PauliLetter, PauliTerm, label_of
from jobkeeper.exceptions import CircuitError, ConfigError
from jobkeeper.stats.allocation import DEFAULT_FLOOR, allocate_shots

Grouping = Literal["qubitwise", "none"]
GROUPINGS: tuple[Grouping, ...] = ("qubitwise", "none")

#: The basis change that turns a letter's eigenbasis into the computational one.
BASIS_CHANGE: dict[PauliLetter, tuple[str, ...]] = {"X": ("h",), "Y": ("sdg", "h"), "Z": ()}

_Z: PauliLetter = "Z"


@dataclass(frozen=True)
class Setting:
    """One measurement setting: ``basis`` (qubit, letter) ascending by qubit, the indices
    of its ``terms`` in the observable, their sum of |coefficients| (``weight``, which
    decides its share of the shots), its ``shots`` (None for an exact estimate) and the
    ``circuit`` to run."""

    index: int
    basis: tuple[tuple[int, PauliLetter], ...]
    terms: tuple[int, ...]
    weight: float
    shots: int | None
    circuit: Circuit

    @property
    def qubits(self) -> tuple[int, ...]:
        """The measured qubits; qubit ``qubits[i]`` is bit i of a count key (from the right)."""
        return tuple(q for q, _ in self.basis)

    @property
    def label(self) -> str:
        return label_of(self.basis)


@dataclass(frozen=True)
class MeasurementPlan:
    """What to run for one estimate: the settings and how they were chosen."""

    observable: Observable
    #: the preparation circuit as given (its final measurements still in).
    circuit: Circuit
    settings: tuple[Setting, ...]
    grouping: Grouping
    #: the total shot budget; None for an exact estimate.
    shots: int | None
    floor: int
    notes: tuple[str, ...]


def group_terms(terms: Sequence[PauliTerm], grouping: Grouping = "qubitwise") -> list[list[int]]:
    """Groups of term indices (each group ascending), in the order the groups were opened."""
    if grouping == "none":
        return [[i] for i in range(len(terms))]
    if grouping != "qubitwise":
        raise ConfigError(f"unknown grouping {grouping!r}: choose {' or '.join(GROUPINGS)}")
    # Each term and each open group as two bit masks over the qubits: X and Y set the x
    # mask, Z and Y the z mask. A term fits a group when, on the qubits both name, both
    # masks agree. (Plain integers: measured faster than numpy over the open groups.)
    xs: list[int] = []
    zs: list[int] = []
    named: list[int] = []
    groups: list[list[int]] = []
    for i in sorted(range(len(terms)), key=lambda i: -abs(terms[i].coefficient)):
        x = z = 0
        for qubit, letter in terms[i].factors:
            if letter != "Z":
                x |= 1 << qubit
            if letter != "X":
                z |= 1 << qubit
        support = x | z
        for hit in range(len(groups)):
            if not ((xs[hit] ^ x) | (zs[hit] ^ z)) & named[hit] & support:
                break
        else:
            hit = len(groups)
            groups.append([])
            xs.append(0)
            zs.append(0)
            named.append(0)
        groups[hit].append(i)
        xs[hit] |= x
        zs[hit] |= z
        named[hit] |= support
    return [sorted(group) for group in groups]


def plan_settings(
    circuit: Circuit,
    observable: Observable,
    *,
    grouping: Grouping = "qubitwise",
    shots: int | None = None,
    floor: int = DEFAULT_FLOOR,
) -> MeasurementPlan:
    """The settings that measure ``observable`` on the state ``circuit`` prepares.

    ``shots`` is the total budget split over the settings
    (:func:`jobkeeper.stats.allocation.allocate_shots`); None plans an exact estimate.
    Raises ObservableError (an index past the circuit), CircuitError (a mid-circuit
    measurement or a condition) or ConfigError (a budget below the floor)."""
    observable.check_fits(circuit.num_qubits)
    operations, dropped = preparation(circuit)
    groups = group_terms(observable.terms, grouping)
    weights = [math.fsum(abs(observable.terms[i].coefficient) for i in g) for g in groups]
    allocation: list[int | None] = (
        [None] * len(groups) if shots is None else list(allocate_shots(weights, shots, floor))
    )
    settings = []
    for index, (group, weight, share) in enumerate(zip(groups, weights, allocation, strict=True)):
        basis = _basis_of(observable.terms[i] for i in group)
        settings.append(
            Setting(
                index, basis, tuple(group), weight, share, measuring(circuit, operations, basis)
            )
        )
    notes = []
    if dropped:
        notes.append(
            f"the circuit's {dropped} final measurement{'s were' if dropped > 1 else ' was'} "
            "dropped: each setting measures the qubits its terms need"
        )
    return MeasurementPlan(
        observable, circuit, tuple(settings), grouping, shots, floor, tuple(notes)
    )


def _basis_of(terms: Iterable[PauliTerm]) -> tuple[tuple[int, PauliLetter], ...]:
    basis: dict[int, PauliLetter] = {}
    for term in terms:
        basis.update(term.factors)
    return tuple(sorted(basis.items()))


def preparation(circuit: Circuit) -> tuple[tuple[Operation, ...], int]:
    """The circuit's operations without its final measurements, and how many were dropped.
    A measurement is final when no later operation but a barrier touches its qubit."""
    where = circuit.source_name or "<circuit>"
    for op in circuit.operations:
        if op.condition is not None:
            raise CircuitError(
                f"'{op.name}' is conditioned on a measured bit: an estimate needs a circuit "
                "that measures only at the end",
                file=where,
            )
    kept: list[Operation] = []
    touched_later: set[int] = set()
    dropped = 0
    for op in reversed(circuit.operations):
        if op.name == MEASURE:
            qubit = op.qubits[0]
            if qubit in touched_later:
                raise CircuitError(
                    f"qubit {qubit} is measured mid-way (an operation after the measurement "
                    "uses it): an estimate needs a circuit that measures only at the end",
                    file=where,
                )
            touched_later.add(qubit)
            dropped += 1
            continue
        if op.name != BARRIER:
            touched_later.update(op.qubits)
        kept.append(op)
    kept.reverse()
    return tuple(kept), dropped


def measuring(
    circuit: Circuit,
    operations: tuple[Operation, ...],
    basis: tuple[tuple[int, PauliLetter], ...],
) -> Circuit:
    """``operations`` (on ``circuit``'s qubits), then the basis change and one measurement
    per qubit of ``basis`` into a single classical register."""
    ops = list(operations)
    for qubit, letter in basis:
        ops.extend(Operation(name, (qubit,)) for name in BASIS_CHANGE[letter])
    ops.extend(Operation(MEASURE, (q,), clbits=(i,)) for i, (q, _) in enumerate(basis))
    return Circuit(
        num_qubits=circuit.num_qubits,
        num_clbits=len(basis),
        qregs=circuit.qregs,
        cregs=(Register(_free_name(circuit), len(basis), 0),),
        operations=tuple(ops),
        opaque=circuit.opaque,
        source_hash=circuit.source_hash,
        source_name=circuit.source_name,
        opaque_signatures=circuit.opaque_signatures,
    )


def calibration_circuits(plan: MeasurementPlan) -> tuple[tuple[int, ...], Circuit, Circuit]:
    """The readout calibration (:mod:`jobkeeper.stats.readout`): the qubits any setting
    measures (ascending: bit j of a key is ``qubits[j]``), a circuit measuring them all
    in 0 and one measuring them all after an ``x`` each."""
    qubits = tuple(sorted({q for s in plan.settings for q in s.qubits}))
    basis = tuple((q, _Z) for q in qubits)
    zeros = measuring(plan.circuit, (), basis)
    ones = measuring(plan.circuit, tuple(Operation("x", (q,)) for q in qubits), basis)
    return qubits, zeros, ones


def _free_name(circuit: Circuit) -> str:
    taken = {r.name for r in circuit.qregs}
    name = "m"
    while name in taken:
        name += "_"
    return name
