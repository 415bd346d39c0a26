"""Every circuit of ../shared/corpus/qasm (public, attributed in its SOURCES.md) parses,
except the known-invalid ones, which are refused at the right line; canonical text
round-trips."""

from __future__ import annotations

import hashlib
import math
from pathlib import Path

import pytest

from jobkeeper.circuit import (
    Circuit,
    Condition,
    canonical_text,
    circuit_hash,
    load_qasm,
    metrics,
    parse_qasm,
)
from jobkeeper.circuit.canonical_read import read_canonical
from jobkeeper.exceptions import CircuitError
from tests.conftest import SHARED

_CORPUS = SHARED / "corpus" / "qasm"
FILES = sorted(p.relative_to(_CORPUS).as_posix() for p in _CORPUS.rglob("*.qasm"))

# The invalid files, their bad line (checked by reading each file) and what is wrong,
# as ../shared/corpus/qasm/SOURCES.md describes them.
INVALID = {
    # line 5 is "w q;"; w is defined nowhere.
    "openqasm/examples/invalid_gate_no_found.qasm": (5, 1, "undefined gate 'w'"),
    # line 3 is "OPENQASM 2.0" without its ';' (reported right after "2.0").
    "openqasm/examples/invalid_missing_semicolon.qasm": (3, 13, "expected ';'"),
    # line 3, 'include "qelib1.inc";', is the first statement: no OPENQASM line, so the
    # program is OpenQASM 3, where qelib1.inc is refused with a pointer to the 2.0 header.
    "QASMBench/medium/sat_n11/sat_n11.qasm": (3, 1, 'start the program with "OPENQASM 2.0;"'),
    # line 225 "measure q[0] -> c[0];": the file declares only "reg".
    "QASMBench/small/vqe_uccsd_n4/vqe_uccsd_n4.qasm": (225, 9, "undeclared register 'q'"),
}


def same_circuit(a: Circuit, b: Circuit) -> bool:
    """Equal up to register names (canonical text renames registers)."""
    return (
        a.num_qubits == b.num_qubits
        and a.num_clbits == b.num_clbits
        and [(r.size, r.offset) for r in a.cregs] == [(r.size, r.offset) for r in b.cregs]
        and a.operations == b.operations
        and a.opaque == b.opaque
        and a.opaque_signatures == b.opaque_signatures
    )


def test_corpus_is_complete(corpus_dir: Path) -> None:
    # SOURCES.md: "68 files (66 circuits and 2 headers)".
    assert len(FILES) == 66
    assert all(Path(rel).name.startswith("invalid_") for rel in INVALID if "invalid_" in rel)


@pytest.mark.parametrize("rel", FILES or ["absent"])
def test_corpus_file(corpus_dir: Path, rel: str) -> None:
    path = corpus_dir / rel
    if rel in INVALID or path.name.startswith("invalid_"):
        line, column, words = INVALID[rel]
        with pytest.raises(CircuitError) as err:
            load_qasm(path)
        assert words in err.value.message
        assert (err.value.file, err.value.line, err.value.column) == (str(path), line, column)
        return
    circuit = load_qasm(path)
    assert circuit.source_hash == "sha256:" + hashlib.sha256(path.read_bytes()).hexdigest()
    assert circuit.num_qubits <= 16  # SOURCES.md: "Every circuit here has at most 16."
    text = canonical_text(circuit)
    again = parse_qasm(text)
    assert same_circuit(circuit, again)
    assert canonical_text(again) == text
    assert circuit_hash(again) == circuit_hash(circuit)
    # The worker's fast reader of canonical text gives exactly what the parser gives.
    assert read_canonical(text, filename="job") == parse_qasm(text, filename="job")
    m = metrics(circuit)
    assert sum(m.operation_counts.values()) == len(circuit.operations)


def test_corpus_spot_checks(corpus_dir: Path) -> None:
    # Read off the files themselves.
    cc = load_qasm(corpus_dir / "QASMBench/medium/cc_n12/cc_n12_transpiled.qasm")
    cond = [op.condition for op in cc.operations if op.condition is not None]
    assert Condition(tuple(range(12)), 2048) in cond  # "if(cr==2048)" on creg cr[12]
    assert any(op.name == "sx" for op in cc.operations)
    ipea = load_qasm(corpus_dir / "openqasm/examples/ipea_3_pi_8.qasm")
    # its own 2-qubit "cu" is inlined: cu1fixed(3*pi/8) -> u1(-a) t; cx; u1(a) t; cx
    assert {op.name for op in ipea.operations} == {"h", "u1", "cx", "measure", "reset"}
    assert ipea.operations[1].params == (float(f"{-3 * math.pi / 8:.12g}"),)
    tele = load_qasm(corpus_dir / "openqasm/examples/teleport.qasm")
    assert [r.name for r in tele.cregs] == ["c0", "c1", "c2"]
    assert [op.condition for op in tele.operations if op.condition] == [
        Condition((0,), 1),
        Condition((1,), 1),
    ]
    m = metrics(tele)
    assert m.has_mid_circuit_measurement and not m.measurements_terminal
    qft = load_qasm(corpus_dir / "openqasm/examples/qft.qasm")  # CRLF line endings
    assert not metrics(qft).has_mid_circuit_measurement
