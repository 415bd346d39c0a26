"""A batch's points grouped by circuit shape, with what the vectorised evolution needs
of them: per operation, one row of parameters per point.

A point of a traced template (:meth:`~jobkeeper.circuit.qasm3.template.Template.traced`)
is kept as the values of its shape's parameter slots alone, already rounded as the
canonical form rounds them, so no Circuit is built for it unless it must run alone.
Other points are bound by the interpreter and grouped by their operations.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import numpy.typing as npt

from jobkeeper.backend import BatchPoint
from jobkeeper.circuit.canonical import canonical_text
from jobkeeper.circuit.ir import Circuit
from jobkeeper.circuit.qasm3.compiled import Shape
from jobkeeper.circuit.qasm3.template import Template
from jobkeeper.exceptions import CircuitError, PermanentBackendError
from jobkeeper.hashing import sha256_tag


@dataclass
class Group:
    """Points of one shape: their indices in the batch, a bound circuit of the shape,
    and per point the slot values (traced) or the circuit (interpreted)."""

    members: list[int]
    first: Circuit
    shape: Shape | None
    rows: list[list[float]] = field(default_factory=list)
    circuits: list[Circuit] = field(default_factory=list)
    _table: npt.NDArray[np.float64] | None = None

    def circuit(self, k: int) -> Circuit:
        """The bound circuit of the group's ``k``-th point."""
        if self.shape is None:
            return self.circuits[k]
        return self.shape.bind(self.rows[k])

    def params(self, position: int, ks: Sequence[int]) -> npt.NDArray[np.float64]:
        """(len(ks) × parameters) of operation ``position`` for the points ``ks``."""
        op = self.first.operations[position]
        if self.shape is None:
            values = [self.circuits[k].operations[position].params for k in ks]
            return np.array(values, dtype=np.float64).reshape(len(ks), len(op.params))
        opened = self.shape.open_at.get(position)
        if opened is None:
            return np.tile(np.array(op.params, dtype=np.float64), (len(ks), 1))
        if self._table is None:
            self._table = np.array(self.rows, dtype=np.float64).reshape(len(self.rows), -1)
        picked = self._table[list(ks)]
        columns = [
            picked[:, slot] if slot is not None else np.full(len(ks), opened.op.params[j])
            for j, slot in enumerate(opened.slots)
        ]
        return np.stack(columns, axis=1)


def _structure(circuit: Circuit) -> object:
    return (
        circuit.num_qubits,
        circuit.num_clbits,
        tuple((r.size, r.offset) for r in circuit.cregs),
        tuple((op.name, op.qubits, op.clbits, op.condition) for op in circuit.operations),
    )


def _checked(index: int, point: BatchPoint, text: str) -> None:
    if point.circuit_hash is not None and sha256_tag(text.encode("utf-8")) != point.circuit_hash:
        raise PermanentBackendError(
            f"point {index}: the bound circuit is not the circuit of its job ({point.circuit_hash})"
        )


def group_points(template: Template, points: Sequence[BatchPoint]) -> list[Group]:
    """The points by shape, in order of first appearance; PermanentBackendError naming
    a point that does not bind or whose circuit is not its job's (``circuit_hash``)."""
    groups: dict[object, Group] = {}
    for index, point in enumerate(points):
        try:
            traced = template.traced(point.values)
            if traced is None:
                circuit, text = template.bind_canonical(point.values)
        except CircuitError as exc:
            raise PermanentBackendError(f"point {index} does not bind: {exc}") from exc
        if traced is not None:
            shape, rounded = traced
            if point.circuit_hash is not None:
                _checked(index, point, shape.text(rounded))
            group = groups.get(shape)
            if group is None:
                group = groups[shape] = Group([], shape.bind(rounded), shape)
            group.members.append(index)
            group.rows.append(rounded)
            continue
        _checked(index, point, text or canonical_text(circuit))
        key = _structure(circuit)
        group = groups.get(key)
        if group is None:
            group = groups[key] = Group([], circuit, None)
        group.members.append(index)
        group.circuits.append(circuit)
    return list(groups.values())
