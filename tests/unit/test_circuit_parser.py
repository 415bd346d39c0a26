"""The OpenQASM 2.0 parser: statements, bit-level layout, errors, the standard gate set."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from jobkeeper.circuit import (
    STANDARD_GATES,
    Condition,
    Operation,
    canonical_text,
    expand_standard,
    load_qasm,
    parse_qasm,
)
from jobkeeper.circuit.gates import GateSpec, parse_gate_definition
from jobkeeper.circuit.lexer import Token, TokenStream, tokenize
from jobkeeper.exceptions import CircuitError
from tests.conftest import shared_path

HEADER = 'OPENQASM 2.0;\ninclude "qelib1.inc";\n'


def ops(text: str) -> tuple[Operation, ...]:
    return parse_qasm(HEADER + text).operations


# ---- statements and bit-level layout -------------------------------------------------


def test_registers_are_laid_out_in_declaration_order() -> None:
    circuit = parse_qasm(HEADER + "qreg a[2];\ncreg x[3];\nqreg b[3];\ncreg y[1];\n")
    assert circuit.num_qubits == 5 and circuit.num_clbits == 4
    assert [(r.name, r.size, r.offset) for r in circuit.qregs] == [("a", 2, 0), ("b", 3, 2)]
    assert [(r.name, r.size, r.offset) for r in circuit.cregs] == [("x", 3, 0), ("y", 1, 3)]


def test_broadcasting() -> None:
    # OpenQASM 2.0 spec (arXiv:1707.03429) section 3: a register argument applies the
    # statement to each index; several registers must have the same size.
    got = ops(
        "qreg a[2];\nqreg b[2];\ncreg c[2];\nh a;\ncx a,b;\ncx a[0],b;\nmeasure b -> c;\nreset a;"
    )
    assert got == (
        Operation("h", (0,)),
        Operation("h", (1,)),
        Operation("cx", (0, 2)),
        Operation("cx", (1, 3)),
        Operation("cx", (0, 2)),
        Operation("cx", (0, 3)),
        Operation("measure", (2,), (), (0,)),
        Operation("measure", (3,), (), (1,)),
        Operation("reset", (0,)),
        Operation("reset", (1,)),
    )


def test_barrier_is_one_operation_on_the_union_of_its_arguments() -> None:
    got = ops("qreg a[2];\nqreg b[2];\nbarrier b, a[1], b[0];")
    assert got == (Operation("barrier", (1, 2, 3)),)


def test_if_condition_names_the_register_bits_lsb_first() -> None:
    # spec section 3 "if(creg==int)": the register is read as an integer, bit 0 least
    # significant; Condition.clbits lists the register's absolute bits from its bit 0.
    got = ops("qreg q[2];\ncreg a[1];\ncreg c[3];\nif(c==5) x q;\nif(c==0) measure q[0] -> a[0];")
    cond = Condition((1, 2, 3), 5)
    assert got == (
        Operation("x", (0,), condition=cond),
        Operation("x", (1,), condition=cond),
        Operation("measure", (0,), (), (0,), Condition((1, 2, 3), 0)),
    )


def test_builtins_become_u3_and_cx_and_standard_gates_keep_their_names() -> None:
    got = ops(
        "qreg q[2];\nU(pi,0,pi) q[0];\nCX q[0],q[1];\nh q[1];\nsx q[0];\ncu(1,2,3,4) q[0],q[1];"
    )
    assert [op.name for op in got] == ["u3", "cx", "h", "sx", "cu"]
    assert got[0].params == (round(math.pi, 11), 0.0, round(math.pi, 11))


def test_user_gates_are_inlined_with_evaluated_parameters() -> None:
    text = (
        "gate inner(t) a { rz(t/2) a; }\n"
        "gate outer(t, s) a, b { inner(t*s) b; cx a, b; barrier a, b; U(t, -s, 0) a; }\n"
        "qreg q[2];\nouter(pi, 2) q[1], q[0];"
    )
    got = ops(text)
    assert got == (
        Operation("rz", (0,), (round(math.pi, 11),)),
        Operation("cx", (1, 0)),
        Operation("barrier", (0, 1)),
        Operation("u3", (1,), (round(math.pi, 11), -2.0, 0.0)),
    )


def test_expressions() -> None:
    # Operator precedence and functions of spec section 3 / the grammar's "exp"; values
    # from memory of ordinary arithmetic.
    cases = {
        "1+2*3": 7.0,
        "-2^2": -4.0,
        "2^3^2": 512.0,
        "2^-1": 0.5,
        "(1+2)*3": 9.0,
        "8/4/2": 1.0,
        "1-2-3": -4.0,
        "1e-3": 0.001,
        "1.5E2": 150.0,
        ".5": 0.5,
        "3.": 3.0,
        "sin(pi/2)+cos(0)+tan(0)": 2.0,
        "exp(0)+ln(1)+sqrt(4)": 3.0,
        "--1": 1.0,
        "-0.0": 0.0,
    }
    for text, value in cases.items():
        (op,) = ops(f"qreg q[1];\nrz({text}) q[0];")
        assert op.params == (value,), text
        assert math.copysign(1.0, op.params[0]) == math.copysign(1.0, value) or value == 0


def test_parameters_are_rounded_to_12_significant_digits() -> None:
    (a,) = ops("qreg q[1];\nrz(pi/2) q[0];")
    (b,) = ops("qreg q[1];\nrz(1.5707963267948966) q[0];")
    assert a == b and a.params == (1.57079632679,)


def test_opaque_gates_are_kept_by_name() -> None:
    circuit = parse_qasm(
        HEADER + "opaque magic(a, b) x, y;\nopaque unused z;\nqreg q[2];\nmagic(1, 2) q[1], q[0];"
    )
    assert circuit.opaque == frozenset({"magic", "unused"})
    assert circuit.opaque_signatures == (("magic", 2, 2), ("unused", 0, 1))
    assert circuit.operations == (Operation("magic", (1, 0), (1.0, 2.0)),)


def test_opaque_gates_may_take_an_extension_name_but_not_an_original_one() -> None:
    circuit = parse_qasm(HEADER + "opaque sx a;\nqreg q[1];\nsx q[0];")
    assert circuit.opaque == frozenset({"sx"})
    assert circuit.operations == (Operation("sx", (0,)),)
    assert parse_qasm(canonical_text(circuit)).opaque == frozenset({"sx"})
    with pytest.raises(CircuitError, match="would shadow the standard gate 'cx'"):
        parse_qasm("OPENQASM 2.0;\nopaque cx a, b;")


def test_user_gate_shadows_an_extension_gate() -> None:
    # ../shared/corpus/qasm/SOURCES.md: programs define their own 2-qubit "cu".
    got = ops("gate cu c, t { cu1(pi/4) c, t; }\nqreg q[2];\ncu q[0], q[1];")
    assert got == (Operation("cu1", (0, 1), (round(math.pi / 4, 12),)),)


def test_crlf_comments_and_free_layout() -> None:
    text = 'OPENQASM 2.0; // version\r\ninclude "qelib1.inc";\r\nqreg q[1];\r\nu1 (pi) q [ 0 ] ;'
    assert parse_qasm(text).operations == (Operation("u1", (0,), (round(math.pi, 11),)),)


def test_empty_gate_body_and_empty_parameter_list() -> None:
    assert ops("gate nop() a { }\nqreg q[1];\nnop() q[0];\nnop q;") == ()


def test_includes_are_relative_to_the_including_file(tmp_path: Path) -> None:
    (tmp_path / "lib").mkdir()
    (tmp_path / "lib" / "mine.inc").write_text('include "more.inc";\ngate mine a { twice a; }\n')
    (tmp_path / "lib" / "more.inc").write_text("gate twice a { x a; x a; }\n")
    main = tmp_path / "main.qasm"
    main.write_text(HEADER + 'include "lib/mine.inc";\nqreg q[1];\nmine q[0];\n')
    circuit = load_qasm(main)
    assert circuit.operations == (Operation("x", (0,)), Operation("x", (0,)))
    assert circuit.source_name == str(main)


def test_includes_outside_the_folder_or_without_a_file_are_refused(tmp_path: Path) -> None:
    (tmp_path / "evil.inc").write_text("gate evil a { x a; }\n")
    inner = tmp_path / "sub"
    inner.mkdir()
    main = inner / "main.qasm"
    main.write_text(HEADER + 'include "../evil.inc";\n')
    with pytest.raises(CircuitError, match="outside the folder") as err:
        load_qasm(main)
    assert (err.value.line, err.value.column) == (3, 9)
    with pytest.raises(CircuitError, match="not read from a file"):
        parse_qasm(HEADER + 'include "evil.inc";\n')
    (inner / "loop.inc").write_text('include "loop.inc";\n')
    main.write_text(HEADER + 'include "loop.inc";\n')
    with pytest.raises(CircuitError, match="includes itself"):
        load_qasm(main)


def test_files_that_are_not_utf8_are_refused(tmp_path: Path) -> None:
    path = tmp_path / "latin1.qasm"
    path.write_bytes(HEADER.encode() + b"// caf\xe9\nqreg q[1];\n")
    with pytest.raises(CircuitError, match="not UTF-8") as err:
        load_qasm(path)
    assert (err.value.line, err.value.column) == (3, 7)
    with pytest.raises(CircuitError, match="cannot read"):
        load_qasm(tmp_path / "absent.qasm")


# ---- errors ----------------------------------------------------------------------------

# (program after the header, line, column, words the message must hold); the header takes
# lines 1-2. What is an error follows the OpenQASM 2.0 spec (arXiv:1707.03429) and its
# grammar; the wording is ours.
BAD = [
    ("qreg q[3];\nh q[5];", 4, 5, "qubit index 5 out of range for register q[3]"),
    ("qreg q[3];\nh q[1]", 4, 7, "expected ';'"),
    ("qreg q[3];\nh q[1]\nh q[2];", 4, 7, "expected ';'"),
    ("qreg q[1];\nw q;", 4, 1, "undefined gate 'w'"),
    ("qreg a[2];\nqreg b[3];\ncx a,b;", 5, 1, "register sizes differ in broadcast"),
    ("qreg q[2];\ncreg c[3];\nmeasure q -> c;", 5, 14, "register sizes differ"),
    ("qreg q[2];\ncreg c[3];\nmeasure q[0] -> c;", 5, 17, "a qubit and a bit"),
    ("qreg q[2];\ncx q[0], q;", 4, 1, "same qubit appears twice"),
    ("qreg q[2];\nh r[0];", 4, 3, "undeclared register 'r'"),
    ("qreg q[2];\ncreg c[2];\nh c[0];", 5, 3, "classical register"),
    ("qreg q[2];\nmeasure q[0] -> q[1];", 4, 17, "quantum register"),
    ("qreg q[2];\nqreg q[3];", 4, 6, "already declared"),
    ("qreg q[0];", 3, 8, "register size"),
    ("qreg q[2];\nrz(1/0) q[0];", 4, 4, "division by zero"),
    ("qreg q[2];\nrz(ln(0)) q[0];", 4, 4, "no finite real value"),
    ("qreg q[2];\nrz((-8)^(1/3)) q[0];", 4, 4, "no finite real value"),
    ("qreg q[2];\nrz(1e999) q[0];", 4, 4, "too large"),
    ("qreg q[2];\nrz(x) q[0];", 4, 4, "unknown name 'x'"),
    ("qreg q[2];\nrz(1,2) q[0];", 4, 1, "takes 1 parameter(s), 2 given"),
    ("qreg q[2];\ncx q[0];", 4, 1, "takes 2 qubit(s), 1 given"),
    ("gate g a { h b; }", 3, 14, "not a qubit argument"),
    ("gate g a { measure a; }", 3, 12, "not allowed in a gate body"),
    ("gate g a { h a[0]; }", 3, 14, "not indexed qubits"),
    ("gate g a { g a; }", 3, 12, "undefined gate 'g'"),
    ("gate g(t) a { rz(s) a; }", 3, 18, "unknown parameter 's'"),
    ("gate g a, a { }", 3, 11, "declared twice"),
    ("gate g a { cx a, a; }", 3, 18, "used twice"),
    ("gate h a { x a; }", 3, 6, "already defined by qelib1.inc"),
    ("gate g a { }\ngate g a { }", 4, 6, "already defined on line 3"),
    ("qreg q[1];\nsx q[0];\ngate sx a { }", 5, 6, "was used on line 4"),
    ("opaque h a;", 3, 8, "already defined by qelib1.inc"),
    ("qreg q[1];\ncreg c[1];\nif(c==1) barrier q;", 5, 10, "cannot follow if"),
    ("qreg q[1];\nif(q==1) x q;", 4, 4, "quantum register"),
    ("qreg q[1];\nif(c==1) x q;", 4, 4, "not declared"),
    ("qreg q[1];\ncreg c[1];\nif(c=1) x q;", 5, 5, "expected '=='"),
    ('include "other.inc";', 3, 9, "not read from a file"),
    ("OPENQASM 2.0;", 3, 1, "only be the first statement"),
    ("qreg Q[1];", 3, 6, "lowercase"),
    ("qreg q[1];\nh q[0]; /* no */", 4, 9, "expected a statement"),
    ("qreg q[1];\nh q[0]; @", 4, 9, "unexpected character '@'"),
    ('include "qelib1.inc', 3, 9, "unterminated string"),
    ("qreg q[1];\nrz(1e) q[0];", 4, 6, "malformed number"),
    ("qreg q[1];\nrz(" + "(" * 60 + "1" + ")" * 60 + ") q[0];", 4, 52, "nested more than"),
    ("qreg q[1];\nrz(" + "-" * 60 + "1) q[0];", 4, 52, "nested more than"),
    ("qreg q[1];\nrz(pi q[0];", 4, 7, "expected ')'"),
    ("qreg q[1];\nrz() q[0];", 4, 1, "takes 1 parameter(s), 0 given"),
    ("qreg q[1];\nqreg pi[2];", 4, 6, "reserved word"),
    ("gate g(pi) a { }", 3, 8, "reserved word"),
]


@pytest.mark.parametrize(("body", "line", "column", "words"), BAD)
def test_errors_name_the_place_and_what_was_expected(
    body: str, line: int, column: int, words: str
) -> None:
    with pytest.raises(CircuitError) as err:
        parse_qasm(HEADER + body, filename="bad.qasm")
    assert words in err.value.message
    assert (err.value.line, err.value.column) == (line, column), err.value.message
    assert str(err.value).startswith(f"bad.qasm:{line}:{column}: ")


@pytest.mark.parametrize(
    ("text", "line", "column", "words"),
    [
        # Without a version line a program is OpenQASM 3, where qelib1.inc is refused
        # with a pointer to the 2.0 header.
        ('include "qelib1.inc";', 1, 1, 'start the program with "OPENQASM 2.0;"'),
        ("OPENQASM 2.1;", 1, 10, "only OpenQASM 2.0"),
        ("OPENQASM 4.0;", 1, 10, "version '3' or '3.x'"),
        ("OPENQASM 2.0\nqreg q[1];", 1, 13, "expected ';'"),
        ("OPENQASM 2.0;\nqreg q[1];\nh q[0];", 3, 1, 'include "qelib1.inc" defines it'),
        ('OPENQASM 2.0;\ngate h a { U(0,0,0) a; }\ninclude "qelib1.inc";', 3, 9, "defines 'h'"),
    ],
)
def test_errors_about_the_version_and_the_header(
    text: str, line: int, column: int, words: str
) -> None:
    with pytest.raises(CircuitError) as err:
        parse_qasm(text)
    assert words in err.value.message
    assert (err.value.line, err.value.column) == (line, column)


def test_errors_inside_gate_expansion_point_at_the_call() -> None:
    with pytest.raises(CircuitError, match="expansion of gate 'g': division by zero") as err:
        parse_qasm(HEADER + "gate g(t) a { rz(1/t) a; }\nqreg q[1];\ng(0) q[0];")
    assert (err.value.line, err.value.column) == (5, 1)


def test_exponential_gate_expansion_is_refused_quickly() -> None:
    lines = ["gate g0 a { x a; x a; }"]
    lines += [f"gate g{i} a {{ g{i - 1} a; g{i - 1} a; }}" for i in range(1, 64)]
    with pytest.raises(CircuitError, match="program too large"):
        parse_qasm(HEADER + "\n".join(lines) + "\nqreg q[1];\ng63 q[0];")


def test_long_gate_chains_do_not_recurse() -> None:
    lines = ["gate g0 a { x a; }"] + [f"gate g{i} a {{ g{i - 1} a; }}" for i in range(1, 3000)]
    got = ops("\n".join(lines) + "\nqreg q[1];\ng2999 q[0];")
    assert got == (Operation("x", (0,)),)


# ---- the standard gate set ----------------------------------------------------------


def _u(theta: float, phi: float, lam: float) -> np.ndarray:
    # U(theta,phi,lambda) of the OpenQASM 2.0 spec (arXiv:1707.03429, section 3.1), up to
    # a global phase: [[cos, -e^{i lam} sin], [e^{i phi} sin, e^{i(phi+lam)} cos]].
    c, s = math.cos(theta / 2), math.sin(theta / 2)
    return np.array(
        [[c, -np.exp(1j * lam) * s], [np.exp(1j * phi) * s, np.exp(1j * (phi + lam)) * c]]
    )


def unitary(name: str, params: tuple[float, ...] = ()) -> np.ndarray:
    """The matrix of a standard gate built from its definition; qubit k is bit k of the
    basis-state index (our convention for this test only)."""
    n = STANDARD_GATES[name].num_qubits
    dim = 1 << n
    total = np.eye(dim, dtype=complex)
    for gate, qubits, values in expand_standard(name, params):
        full = np.zeros((dim, dim), dtype=complex)
        for col in range(dim):
            if gate == "U":
                (q,) = qubits
                bit = (col >> q) & 1
                m = _u(*values)
                for out in (0, 1):
                    full[(col & ~(1 << q)) | (out << q), col] += m[out, bit]
            else:
                c, t = qubits
                full[col ^ (((col >> c) & 1) << t), col] = 1
        total = full @ total
    return total


def controlled(m: np.ndarray, n_controls: int) -> np.ndarray:
    """Textbook multi-controlled gate (Nielsen & Chuang §4.3): controls are qubits
    0..n_controls-1, the target the next one."""
    n = n_controls + 1
    out = np.eye(1 << n, dtype=complex)
    mask = (1 << n_controls) - 1
    for col in range(1 << n):
        if col & mask == mask:
            for b in (0, 1):
                row = (col & mask) | (b << n_controls)
                out[row, col] = m[b, col >> n_controls]
    return out


def same_up_to_phase(a: np.ndarray, b: np.ndarray) -> bool:
    k = np.unravel_index(np.argmax(abs(b)), b.shape)
    return bool(np.allclose(a * (b[k] / a[k]), b, atol=1e-9))


X = np.array([[0, 1], [1, 0]], dtype=complex)
SX = np.array([[1 + 1j, 1 - 1j], [1 - 1j, 1 + 1j]]) / 2  # sqrt(X), from memory


@pytest.mark.parametrize(
    ("name", "params", "expected"),
    [
        ("cx", (), controlled(X, 1)),  # textbook CNOT
        ("ccx", (), controlled(X, 2)),  # Toffoli, Nielsen & Chuang §4.3
        ("c3x", (), controlled(X, 3)),
        ("c4x", (), controlled(X, 4)),  # our decision: c4x is the 4-controlled X
        ("sx", (), SX),
        ("sxdg", (), SX.conj().T),
        ("csx", (), controlled(SX, 1)),
        ("c3sqrtx", (), controlled(SX.conj().T, 3)),  # as the QASMBench body builds it
        ("cp", (0.7,), np.diag([1, 1, 1, np.exp(0.7j)])),
        ("p", (0.7,), np.diag([1, np.exp(0.7j)])),
        ("u", (0.3, 0.2, 0.1), _u(0.3, 0.2, 0.1)),
        ("cswap", (), np.eye(8)[[0, 1, 2, 5, 4, 3, 6, 7]]),  # Fredkin, control qubit 0
        ("swap", (), np.eye(4)[[0, 2, 1, 3]]),
    ],
)
def test_standard_gates_mean_what_their_names_say(
    name: str, params: tuple[float, ...], expected: np.ndarray
) -> None:
    assert same_up_to_phase(unitary(name, params), expected)


def test_cu_is_controlled_u_with_a_phase() -> None:
    # cu(theta,phi,lambda,gamma) = controlled e^{i gamma} U(theta,phi,lambda), from memory
    # of the later headers' documentation; control qubit 0, target qubit 1.
    theta, phi, lam, gamma = 0.3, 0.5, 0.7, 1.1
    cu = unitary("cu", (theta, phi, lam, gamma))
    assert same_up_to_phase(cu, controlled(np.exp(1j * gamma) * _u(theta, phi, lam), 1))


def test_cu3_keeps_the_original_definition() -> None:
    # arXiv:1707.03429's cu3 is controlled-U only up to diag(1, e^{-i(phi+lambda)/2}) on
    # the control (../shared/corpus/qasm/SOURCES.md).
    theta, phi, lam = 0.3, 0.5, 0.7
    phase = np.kron(np.eye(2), np.diag([1, np.exp(-0.5j * (phi + lam))]))
    assert same_up_to_phase(
        unitary("cu3", (theta, phi, lam)), phase @ controlled(_u(theta, phi, lam), 1)
    )


def _load_header(path: Path) -> dict[str, GateSpec]:
    text = path.read_text(encoding="utf-8")
    stream = TokenStream(tokenize(text, str(path)), str(path))
    gates: dict[str, GateSpec] = {}

    def lookup(tok: Token) -> GateSpec:
        return gates[tok.text]

    while stream.peek().kind != "eof":
        spec = parse_gate_definition(stream, stream.expect("gate"), lookup)
        gates[spec.name] = spec
    return gates


def _flatten(gates: dict[str, GateSpec], name: str, params: tuple[float, ...]) -> list[object]:
    out: list[object] = []

    def walk(spec: GateSpec, env: tuple[float, ...], qubits: tuple[int, ...]) -> None:
        assert spec.body is not None
        for op in spec.body:
            mapped = tuple(qubits[i] for i in op.qubits)
            values = tuple(p.evaluate(env) for p in op.params)
            if op.name in ("U", "CX"):
                out.append((op.name, mapped, pytest.approx(values, abs=1e-12)))
            else:
                walk(gates[op.name], values, mapped)

    spec = gates[name]
    walk(spec, params, tuple(range(spec.num_qubits)))
    return out


def test_embedded_header_matches_the_published_headers() -> None:
    corpus = shared_path("corpus", "qasm")
    original = _load_header(corpus / "openqasm" / "examples" / "qelib1.inc")
    extended = _load_header(corpus / "QASMBench" / "qelib1.inc")
    params = (0.31, 0.47, 0.73, 0.11)
    for name, spec in STANDARD_GATES.items():
        p = params[: spec.num_params]
        if not spec.extension:
            assert _flatten(original, name, p) == expand_standard(name, p), name
        elif name in extended and name != "c4x":
            assert _flatten(extended, name, p) == expand_standard(name, p), name
    assert set(original) == {n for n, s in STANDARD_GATES.items() if not s.extension}
    # The later header's cu3 differs (SOURCES.md): we keep the original on purpose.
    assert _flatten(extended, "cu3", params[:3]) != expand_standard("cu3", params[:3])
    assert _flatten(extended, "c4x", ()) != expand_standard("c4x", ())


def test_expand_standard_reaches_only_builtins() -> None:
    for name, spec in STANDARD_GATES.items():
        prims = expand_standard(name, [0.1] * spec.num_params)
        assert all(g in ("U", "CX") for g, _, _ in prims)
        assert all(max(q) < spec.num_qubits for _, q, _ in prims if q)
    with pytest.raises(ValueError):
        expand_standard("rz", [])


def test_lone_carriage_returns_end_lines_and_comments() -> None:
    # Old Mac line ends: a comment must not swallow the rest of the program.
    text = HEADER.replace("\n", "\r") + "qreg q[1]; // one\rx q[0];\rh q[5];"
    with pytest.raises(CircuitError, match="out of range") as err:
        parse_qasm(text)
    assert err.value.line == 5


def test_total_register_size_is_bounded() -> None:
    with pytest.raises(CircuitError, match="in total"):
        parse_qasm(HEADER + "qreg a[16777216];\nqreg b[1];")


def test_deep_caller_stack_gives_a_circuit_error_not_a_crash() -> None:
    import sys

    text = HEADER + "qreg q[1];\nrz(" + "(" * 40 + "1" + ")" * 40 + ") q[0];"

    def nest(depth: int) -> None:
        if depth:
            nest(depth - 1)
        else:
            parse_qasm(text)

    depth, frame = 0, sys._getframe()
    while frame is not None:
        depth, frame = depth + 1, frame.f_back
    with pytest.raises(CircuitError, match="nested too deeply"):
        nest(sys.getrecursionlimit() - depth - 60)  # leaves the parser ~60 frames


def test_unreadable_includes_name_the_including_statement(tmp_path: Path) -> None:
    main = tmp_path / "main.qasm"
    for name, words in [
        ("absent.inc", "cannot read"),
        ("a\x00b", "cannot include"),
        ("", "cannot read"),
    ]:
        main.write_text(HEADER + f'include "{name}";\n')
        with pytest.raises(CircuitError, match=words) as err:
            load_qasm(main)
        assert (err.value.file, err.value.line, err.value.column) == (str(main), 3, 9)
