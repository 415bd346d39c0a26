"""Size and shape of a circuit: what a user checks before paying for a run, and what a
backend checks before accepting one.

Depth: the length of the longest chain of operations that share a qubit or a bit.
``measure`` and ``reset`` count as layers (they take time on a device); a measurement
occupies its bit too, and a conditioned operation also occupies the bits of the register
it tests, since it must wait for them. A ``barrier`` adds no layer but synchronises its
qubits: everything after it starts after everything before it on those qubits, which is
what a barrier is written for (it forbids moving operations across it).

Measurements are terminal when nothing follows a measurement on its qubit except other
barriers, and no operation is conditioned on classical bits: such a circuit can be run
once and sampled. ``has_mid_circuit_measurement`` is true when a measured qubit is used
again (gate, reset or another measurement) or a measured bit steers a later operation.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import asdict, dataclass
from typing import Any

from jobkeeper.circuit.ir import BARRIER, MEASURE, Circuit


@dataclass(frozen=True)
class CircuitMetrics:
    num_qubits: int
    num_clbits: int
    #: qubits some operation other than a barrier acts on, ascending.
    qubits_used: tuple[int, ...]
    #: bits written by a measurement or read by a condition, ascending.
    bits_used: tuple[int, ...]
    #: every operation, barriers included.
    num_operations: int
    #: operations by name (barriers, measure and reset included), sorted by name.
    operation_counts: dict[str, int]
    #: gates (not barriers) acting on two or more qubits.
    multi_qubit_operations: int
    depth: int
    #: operations under ``if(creg==value)``.
    conditional_operations: int
    measurements_terminal: bool
    has_mid_circuit_measurement: bool

    def to_json(self) -> dict[str, Any]:
        """A JSON-ready dict (the convention of every ``to_json`` in jobkeeper)."""
        data = asdict(self)
        data["qubits_used"] = list(self.qubits_used)
        data["bits_used"] = list(self.bits_used)
        return data


def metrics(circuit: Circuit) -> CircuitMetrics:
    # dicts, not lists: a circuit may declare far more qubits than it uses
    qubit_level: dict[int, int] = {}
    bit_level: dict[int, int] = {}
    qubits_used: set[int] = set()
    bits_used: set[int] = set()
    measured_qubits: set[int] = set()
    measured_bits: set[int] = set()
    counts: Counter[str] = Counter()
    multi = conditional = depth = 0
    mid = False
    for op in circuit.operations:
        counts[op.name] += 1
        if op.name == BARRIER:
            top = max((qubit_level.get(q, 0) for q in op.qubits), default=0)
            for q in op.qubits:
                qubit_level[q] = top
            continue
        bits = op.clbits
        if op.condition is not None:
            conditional += 1
            bits = bits + op.condition.clbits
            if measured_bits.intersection(op.condition.clbits):
                mid = True
        if measured_qubits.intersection(op.qubits):
            mid = True
        level = 1 + max(
            max((qubit_level.get(q, 0) for q in op.qubits), default=0),
            max((bit_level.get(b, 0) for b in bits), default=0),
        )
        for q in op.qubits:
            qubit_level[q] = level
        for b in bits:
            bit_level[b] = level
        depth = max(depth, level)
        qubits_used.update(op.qubits)
        bits_used.update(bits)
        if len(op.qubits) >= 2:
            multi += 1
        if op.name == MEASURE:
            measured_qubits.update(op.qubits)
            measured_bits.update(op.clbits)
    return CircuitMetrics(
        num_qubits=circuit.num_qubits,
        num_clbits=circuit.num_clbits,
        qubits_used=tuple(sorted(qubits_used)),
        bits_used=tuple(sorted(bits_used)),
        num_operations=len(circuit.operations),
        operation_counts=dict(sorted(counts.items())),
        multi_qubit_operations=multi,
        depth=depth,
        conditional_operations=conditional,
        measurements_terminal=not mid and conditional == 0,
        has_mid_circuit_measurement=mid,
    )
