"""No OpenQASM 3 input makes the reader crash, hang or take more than linear time: every
input gives a Circuit or a CircuitError, nothing else (as for 2.0, test_circuit_fuzz)."""

from __future__ import annotations

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.conftest import SHARED
from tests.unit.test_circuit_fuzz import (
    load_bytes_safely,
    mutated,
    parse_only_safely,
    superlinear,
)

SETTINGS = settings(max_examples=150, deadline=None, suppress_health_check=list(HealthCheck))
H3 = 'OPENQASM 3.0;\ninclude "stdgates.inc";\n'

_CORPUS = SHARED / "corpus" / "qasm3" / "examples"
CORPUS_BYTES = [p.read_bytes() for p in sorted(_CORPUS.glob("*.qasm"))] if _CORPUS.exists() else []

TOKENS = [
    "OPENQASM 3;", 'include "stdgates.inc";', "qubit", "bit", "qreg", "creg", "int", "uint",
    "float", "bool", "const", "input", "output", "angle", "q", "c", "r", "i", "[", "]", "(",
    ")", "{", "}", ";", ",", ":", "->", "=", "==", "+=", "<<=", "@", "ctrl", "negctrl", "inv",
    "pow", "gate", "measure", "reset", "barrier", "if", "else", "for", "in", "while", "gphase",
    "U", "h", "cx", "rz", "ccx", "cu", "sx", "pi", "π", "τ", "sin", "+", "-", "*", "/", "**",
    "^", "&&", "||", "!", "~", "<<", ">>", "0", "1", "2", "3", "1.5", "1e-3", ".5", "1e999",
    "0b101", "0x1f", "1_000", '"0101"', "10ns", "1im", "$0", "#", "//", "/*", "*/", "\n", " ",
    '"', "true", "false", "delay", "def", "let",
]  # fmt: skip


@SETTINGS
@given(st.lists(st.sampled_from(TOKENS), max_size=80))
def test_token_soup(tokens: list[str]) -> None:
    parse_only_safely(H3 + " ".join(tokens))
    parse_only_safely("qubit[3] q; bit[3] c; " + " ".join(tokens))


@SETTINGS
@given(
    st.sampled_from(range(max(len(CORPUS_BYTES), 1))),
    st.lists(
        st.tuples(
            st.sampled_from(["insert", "delete", "replace"]),
            st.floats(0, 1, exclude_max=True),
            st.binary(min_size=1, max_size=4) | st.sampled_from([t.encode() for t in TOKENS]),
        ),
        min_size=1,
        max_size=6,
    ),
)
def test_mutated_examples(index: int, edits: list[tuple[str, float, bytes]]) -> None:
    if not CORPUS_BYTES:
        return
    load_bytes_safely(mutated(CORPUS_BYTES[index], edits))


def test_the_examples_are_there_for_the_fuzzer() -> None:
    if SHARED.exists():
        assert len(CORPUS_BYTES) == 21


SHAPES = {
    "gate lines": lambda n: H3 + "qubit[2] q;\n" + "h q[0];\n" * n,
    "nested parens": lambda n: H3 + "qubit q;\nrz(" + "(" * n + "1" + ")" * n + ") q;",
    "unary minus": lambda n: H3 + "qubit q;\nrz(" + "-" * 2 * n + "1) q;",
    "power tower": lambda n: H3 + "qubit q;\nrz(" + "1**" * n + "1) q;",
    "long sum": lambda n: H3 + "qubit q;\nrz(" + "+".join(["pi"] * n) + ") q;",
    "nested blocks": lambda n: H3 + "qubit q;\n" + "if (true) {" * n + "x q;" + "}" * n,
    "modifier chain": lambda n: H3 + "qubit q;\n" + "inv @ " * n + "x q;",
    "loop": lambda n: H3 + f"qubit q;\nfor int i in [1:{n}] {{ rz(i) q; }}",
    "conditions": lambda n: H3 + "qubit q;\nbit[3] c;\n" + "if (c[1] == 1) { x q; } else { h q; }\n" * (n // 4),
    "gate chain": lambda n: (
        H3 + "gate g0 a { x a; }\n"
        + "".join(f"gate g{i} a {{ g{i - 1} a; }}\n" for i in range(1, n // 4))
        + f"qubit q;\ng{n // 4 - 1} q;\n"
    ),
    "block comment": lambda n: H3 + "/*" + "\n" * n + "*/ qubit q;",
    "long identifier": lambda n: H3 + "qubit " + "a" * (50 * n) + ";",
    "unterminated gate": lambda n: H3 + "gate g a {" + " h a;" * (n // 2),
}  # fmt: skip


def test_parse_time_is_linear() -> None:
    # As for 2.0: 10x the input may take at most 30x the time (quadratic shows as ~100x).
    slow = superlinear(SHAPES)
    assert not slow, f"superlinear parse time: {slow}"
