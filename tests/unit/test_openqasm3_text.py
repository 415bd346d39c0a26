"""Circuits written as OpenQASM 3 text (jobkeeper.circuit.openqasm3) read back as the same
circuit.

Sources: the OpenQASM 3 specification's standard library (stdgates.inc, copied in
../shared/corpus/qasm3/examples/stdgates.inc; standard_library.rst) names most gates of
the OpenQASM 2.0 standard header (arXiv:1707.03429) alike: a circuit of those reads back
with the same canonical text. The header's other gates go with their header definitions:
their matrices, built from the IR (tests/unit/test_qasm3_gates.unitary), must agree up
to a global phase (which no measurement sees; Nielsen & Chuang §2.2.7)."""

from __future__ import annotations

import random

import pytest

from jobkeeper.circuit import circuit_hash, parse_qasm
from jobkeeper.circuit.openqasm3 import SHARED_GATES, openqasm3_text
from jobkeeper.circuit.stdgates import STANDARD_GATES
from jobkeeper.exceptions import CircuitError
from tests.unit.test_qasm3_gates import equal_up_to_phase, unitary


def _call(name: str) -> str:
    spec = STANDARD_GATES[name]
    rng = random.Random(name)  # seeded per gate
    params = ",".join(f"{rng.uniform(-3, 3):.6f}" for _ in range(spec.num_params))
    qubits = ",".join(f"q[{k}]" for k in range(spec.num_qubits))
    return f"{name}({params}) {qubits};" if params else f"{name} {qubits};"


def _program(line: str) -> str:
    return f'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[5];\nh q[0];\n{line}\n'


@pytest.mark.parametrize("name", sorted(STANDARD_GATES))
def test_every_standard_gate_reads_back_as_the_same_operation(name: str) -> None:
    circuit = parse_qasm(_program(_call(name)))
    text = openqasm3_text(circuit)
    assert text.startswith('OPENQASM 3.0;\ninclude "stdgates.inc";\n')
    back = parse_qasm(text)
    if name in SHARED_GATES:
        assert circuit_hash(back) == circuit_hash(circuit)
    else:  # declared with the header's definition: the same matrix, decomposed
        assert f"gate {name}" in text
        assert equal_up_to_phase(unitary(back), unitary(circuit))


def test_registers_measurements_conditions_resets_and_barriers_keep_their_meaning() -> None:
    # an invented circuit with two classical registers (their order and sizes decide how
    # count keys are written) and a condition on a whole register
    source = (
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[3];\ncreg a[2];\ncreg b[1];\n'
        "rz(pi/7) q[0];\nh q[0];\ncx q[0],q[1];\nbarrier q;\nmeasure q[0] -> a[0];\n"
        "measure q[1] -> a[1];\nif(a==3) x q[2];\nreset q[1];\nmeasure q[2] -> b[0];\n"
    )
    circuit = parse_qasm(source)
    text = openqasm3_text(circuit)
    assert "bit[2] c0;\nbit[1] c1;\n" in text and "if (c0 == 3) x q[2];" in text
    assert "c0[1] = measure q[1];" in text and "barrier q[0], q[1], q[2];" in text
    back = parse_qasm(text)
    assert circuit_hash(back) == circuit_hash(circuit)
    assert [(r.size, r.offset) for r in back.cregs] == [(2, 0), (1, 2)]


def test_a_program_read_from_openqasm_3_is_written_back_alike() -> None:
    source = (
        'OPENQASM 3.0;\ninclude "stdgates.inc";\nqubit[2] q;\nbit[2] c;\n'
        "ctrl @ x q[0], q[1];\ninv @ s q[1];\nc = measure q;\n"
    )
    circuit = parse_qasm(source)
    assert circuit_hash(parse_qasm(openqasm3_text(circuit))) == circuit_hash(circuit)


def test_opaque_gates_cannot_be_written() -> None:
    circuit = parse_qasm(
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nopaque magic a;\nqreg q[1];\nmagic q[0];\n'
    )
    with pytest.raises(CircuitError, match="no opaque gates; the circuit declares magic"):
        openqasm3_text(circuit)
