"""The OpenQASM 3 specification's own programs (../shared/corpus/qasm3, from the
openqasm/openqasm repository, see its SOURCES.md): each example runs or is refused naming
its unsupported feature; each statement of the grammar's invalid tests is refused."""

from __future__ import annotations

from pathlib import Path

import pytest

from jobkeeper.circuit import load_qasm, parse_qasm
from jobkeeper.exceptions import CircuitError
from tests.conftest import shared_path
from tests.unit.test_statevector_helpers import exact

TOL = 1e-9

#: Examples outside the subset: the line and column of the first unsupported statement
#: (read from each file) and the feature named.
REFUSED = {
    "alignment.qasm": (8, 1, "stretch is not supported"),
    "arrays.qasm": (9, 1, "array is not supported"),
    "dd.qasm": (7, 1, "stretch is not supported"),
    "defcal.qasm": (1, 1, "defcalgrammar is not supported"),
    "gateteleport.qasm": (6, 1, "extern is not supported"),
    "ipe.qasm": (11, 1, "angle (as a variable type"),
    "msd.qasm": (9, 1, "def (subroutines) is not supported"),
    "qec.qasm": (9, 1, "def (subroutines) is not supported"),
    "rus.qasm": (12, 1, "def (subroutines) is not supported"),
    "scqec.qasm": (16, 1, "extern is not supported"),
    "t1.qasm": (6, 1, "duration is not supported"),
    "varteleport.qasm": (9, 1, "def (subroutines) is not supported"),
    "vqe.qasm": (17, 1, "extern is not supported"),
    # A fragment, not a program: it declares no qubits and calls CX without the library.
    "cphase.qasm": (4, 3, "undefined gate 'CX'"),
}
RUNS = ["adder.qasm", "inverseqft1.qasm", "inverseqft2.qasm", "qft.qasm", "qpt.qasm", "rb.qasm", "teleport.qasm"]  # fmt: skip


def example(name: str) -> Path:
    return shared_path("corpus", "qasm3", "examples", name)


def test_every_example_is_classified() -> None:
    folder = shared_path("corpus", "qasm3", "examples")
    assert sorted(p.name for p in folder.glob("*.qasm")) == sorted([*REFUSED, *RUNS])


@pytest.mark.parametrize("name", sorted(REFUSED))
def test_examples_outside_the_subset_are_refused_naming_the_feature(name: str) -> None:
    line, column, words = REFUSED[name]
    with pytest.raises(CircuitError) as err:
        load_qasm(example(name))
    assert (err.value.line, err.value.column) == (line, column)
    assert words in err.value.message
    assert str(err.value).startswith(f"{example(name)}:{line}:{column}: ")


def test_adder_adds_1_to_15() -> None:
    # adder.qasm's own comment and Cuccaro et al., quant-ph/0410184: a = 0001, b = 1111,
    # so ans = a + b = 16 = 10000 with probability 1.
    assert exact(load_qasm(example("adder.qasm"))) == pytest.approx({"10000": 1.0}, abs=TOL)


@pytest.mark.parametrize("name", ["inverseqft1.qasm", "inverseqft2.qasm"])
def test_measured_inverse_qft_undoes_the_uniform_superposition(name: str) -> None:
    # Both programs apply h to every qubit, then the semiclassical inverse QFT
    # (Griffiths & Niu 1996; Nielsen & Chuang section 5.1): H^n|0> is the QFT of |0>,
    # so every measurement reads 0.
    probs = exact(load_qasm(example(name)))
    key = "0000" if name == "inverseqft1.qasm" else "0|0|0|0"
    assert probs == pytest.approx({key: 1.0}, abs=TOL)


def test_qft_of_a_basis_state_is_uniform() -> None:
    # N&C section 5.1: the QFT maps a basis state to equal amplitudes on all 16 states.
    probs = exact(load_qasm(example("qft.qasm")))
    assert len(probs) == 16
    assert all(p == pytest.approx(1 / 16, abs=TOL) for p in probs.values())


def test_teleport_delivers_the_prepared_state() -> None:
    # N&C section 1.3.7: after the corrections q[2] holds U(0.3,0.2,0.1)|0>, which reads 1
    # with probability sin²(0.15); the two sent bits are uniform.
    probs = exact(load_qasm(example("teleport.qasm")))
    p1 = sum(p for key, p in probs.items() if key.endswith("1"))  # q[2]'s, declared last
    assert p1 == pytest.approx(0.14943813247359922**2, abs=TOL)  # sin(0.15)
    for sent in ("0|0", "0|1", "1|0", "1|1"):  # the first two registers, joined by "|"
        assert sum(p for k, p in probs.items() if k.startswith(sent)) == pytest.approx(0.25)


@pytest.mark.parametrize(
    ("name", "expected"), [("rb.qasm", {"00": 1.0}), ("qpt.qasm", {"0": 0.5, "1": 0.5})]
)
def test_small_examples(name: str, expected: dict[str, float]) -> None:
    # rb.qasm: the sequence h; cz; s; cz; s; z; h composes to the identity on |00>
    # (worked by hand, common practice); qpt.qasm: h on |0> reads 0 or 1 evenly.
    assert exact(load_qasm(example(name))) == pytest.approx(expected, abs=TOL)


def test_cphase_fragment_with_declarations_is_the_controlled_phase() -> None:
    # The fragment's gate is the textbook controlled phase diag(1,1,1,e^{iθ}) (the
    # specification's gates.rst says so beside it); on |11> after h h, compare with cp.
    body = example("cphase.qasm").read_text()
    head = 'OPENQASM 3.0;\ninclude "stdgates.inc";\nqubit[2] q;\nbit[2] c;\nh q;\n'
    three = parse_qasm(head + body.replace("cphase", "mycphase") + "h q;\nc = measure q;\n")
    two = parse_qasm(
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c[2];\nh q;\n'
        "cp(pi/2) q[0],q[1];\nh q;\nmeasure q -> c;\n"
    )
    assert exact(three) == pytest.approx(exact(two), abs=TOL)


def _invalid_statements() -> list[tuple[str, int, str]]:
    folder = shared_path("corpus", "qasm3", "invalid")
    out = []
    for path in sorted(folder.glob("*.qasm")):
        for number, line in enumerate(path.read_text().splitlines(), 1):
            if line.strip() and not line.strip().startswith("//"):
                out.append((path.name, number, line))
    return out


def test_the_invalid_corpus_has_its_statements() -> None:
    assert len(_invalid_statements()) >= 120


@pytest.mark.parametrize(("file", "number", "statement"), _invalid_statements())
def test_every_invalid_statement_is_refused(file: str, number: int, statement: str) -> None:
    text = f'OPENQASM 3.0;\ninclude "stdgates.inc";\nqubit[2] q;\n{statement}\n'
    with pytest.raises(CircuitError):
        parse_qasm(text, filename=f"{file}:{number}")
