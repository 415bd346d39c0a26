"""Circuit metrics. Expected values are counted by hand from the circuits; the depth rules
(barriers synchronise but add no layer; measure and reset are layers) are ours, written in
jobkeeper/circuit/metrics.py, and follow common practice for circuit depth."""

from __future__ import annotations

import json

from jobkeeper.circuit import CircuitMetrics, metrics, parse_qasm

HEADER = 'OPENQASM 2.0;\ninclude "qelib1.inc";\n'


def m(body: str) -> CircuitMetrics:
    return metrics(parse_qasm(HEADER + body))


def test_bell_circuit() -> None:
    got = m(
        "qreg q[3];\ncreg c[2];\nh q[0];\ncx q[0],q[1];\n"
        "measure q[0] -> c[0];\nmeasure q[1] -> c[1];"
    )
    assert got.num_qubits == 3 and got.num_clbits == 2
    assert got.qubits_used == (0, 1) and got.bits_used == (0, 1)
    assert got.operation_counts == {"cx": 1, "h": 1, "measure": 2}
    assert got.num_operations == 4 and got.multi_qubit_operations == 1
    assert got.depth == 3
    assert got.measurements_terminal and not got.has_mid_circuit_measurement


def test_barrier_synchronises_without_adding_a_layer() -> None:
    assert m("qreg q[2];\nh q[0];\nx q[1];").depth == 1
    assert m("qreg q[2];\nh q[0];\nbarrier q;\nx q[1];").depth == 2
    assert m("qreg q[2];\nbarrier q;\nbarrier q;").depth == 0
    got = m("qreg q[3];\nh q[0];\nbarrier q;")
    assert got.qubits_used == (0,) and got.operation_counts == {"barrier": 1, "h": 1}


def test_mid_circuit_measurement() -> None:
    got = m("qreg q[1];\ncreg c[1];\nmeasure q[0] -> c[0];\nx q[0];")
    assert got.has_mid_circuit_measurement and not got.measurements_terminal
    got = m("qreg q[1];\ncreg c[1];\nmeasure q[0] -> c[0];\nreset q[0];")
    assert got.has_mid_circuit_measurement and got.depth == 2
    got = m("qreg q[2];\ncreg c[1];\nmeasure q[0] -> c[0];\nbarrier q;\nmeasure q[1] -> c[0];")
    assert not got.has_mid_circuit_measurement and got.measurements_terminal


def test_conditions() -> None:
    # feed-forward: a measured bit steers a later gate on another qubit
    got = m("qreg q[2];\ncreg c[1];\nmeasure q[0] -> c[0];\nif(c==1) x q[1];")
    assert got.has_mid_circuit_measurement and not got.measurements_terminal
    assert got.conditional_operations == 1
    assert got.depth == 2  # the x waits for the bit
    # a condition on a never-measured register is not a measurement, but not terminal
    got = m("qreg q[1];\ncreg c[1];\nif(c==0) x q[0];")
    assert not got.has_mid_circuit_measurement and not got.measurements_terminal
    assert got.bits_used == (0,)


def test_to_json() -> None:
    got = m("qreg q[2];\ncreg c[2];\nh q;\nmeasure q -> c;")
    data = got.to_json()
    assert json.loads(json.dumps(data)) == data
    assert data["qubits_used"] == [0, 1] and data["operation_counts"] == {"h": 2, "measure": 2}
    assert data["depth"] == 2
