"""One circuit however written: each OpenQASM 3 feature of the subset against a
hand-written OpenQASM 2.0 twin of the same meaning (arXiv:1707.03429 for 2.0, the
specification's chapters in ../shared/corpus/qasm3/spec for 3). Same exact distribution
(1e-9) always; the same circuit hash where the operations are the same."""

from __future__ import annotations

import pytest

from jobkeeper.circuit import circuit_hash, parse_qasm
from jobkeeper.exceptions import CircuitError
from tests.unit.test_statevector_helpers import exact, tvd

TOL = 1e-9
H3 = 'OPENQASM 3.0;\ninclude "stdgates.inc";\n'
H2 = 'OPENQASM 2.0;\ninclude "qelib1.inc";\n'

# (feature, 3.0 program, 2.0 twin, same operations?)
TWINS = [
    ("declarations", "qubit[2] q; bit[2] c; h q[0]; cx q[0], q[1]; c = measure q;",
     "qreg q[2]; creg c[2]; h q[0]; cx q[0],q[1]; measure q -> c;", True),
    ("old-style registers", "qreg q[2]; creg c[2]; h q; measure q -> c;",
     "qreg q[2]; creg c[2]; h q; measure q -> c;", True),
    ("single qubit and bit", "qubit q; bit b; x q; b = measure q;",
     "qreg q[1]; creg b[1]; x q[0]; measure q[0] -> b[0];", True),
    ("indexed measure", "qubit[2] q; bit[2] c; x q[1]; c[0] = measure q[1]; c[1] = measure q[0];",
     "qreg q[2]; creg c[2]; x q[1]; measure q[1] -> c[0]; measure q[0] -> c[1];", True),
    ("slices", "qubit[4] q; bit[3] c; x q[1:3]; measure q[3:-1:1] -> c;",
     "qreg q[4]; creg c[3]; x q[1]; x q[2]; x q[3]; measure q[3] -> c[0]; measure q[2] -> c[1]; measure q[1] -> c[2];", True),
    ("reset and barrier", "qubit[2] q; bit[2] c; x q; reset q[0]; barrier q; c = measure q;",
     "qreg q[2]; creg c[2]; x q; reset q[0]; barrier q; measure q -> c;", True),
    ("gate definition", "gate g(a) x, y { rx(a) x; cx x, y; } qubit[2] q; bit[2] c; g(0.4) q[0], q[1]; c = measure q;",
     "gate g(a) x, y { rx(a) x; cx x, y; } qreg q[2]; creg c[2]; g(0.4) q[0],q[1]; measure q -> c;", True),
    ("constants", "qubit q; bit c; rx(π/3) q; ry(tau/8) q; rz(ℯ) q; rx(euler - pi) q; c = measure q;",
     "qreg q[1]; creg c[1]; rx(pi/3) q[0]; ry(pi/4) q[0]; rz(2.718281828459045) q[0]; rx(2.718281828459045-pi) q[0]; measure q[0] -> c[0];", True),
    ("const and arithmetic", "const int n = 3; const float a = 0.25 * n; uint[2] w = 7; qubit q; bit c; rx(a + w) q; rx(2 ** n) q; c = measure q;",
     "qreg q[1]; creg c[1]; rx(3.75) q[0]; rx(8) q[0]; measure q[0] -> c[0];", True),
    ("casts and bit indexing", "uint[4] v = 10; qubit[4] q; bit[4] c; for uint i in [0:3] { if (bool(v[i])) x q[i]; } if (uint[2](v) == 2) h q[0]; c = measure q;",
     "qreg q[4]; creg c[4]; x q[1]; x q[3]; h q[0]; measure q -> c;", True),
    ("bit slices of integers", "int[8] v = 13; qubit q; bit c; if (uint[3](bit[3](v[1:3])) == 6 && int[3](v[1:3]) == -2) x q; c = measure q;",
     "qreg q[1]; creg c[1]; x q[0]; measure q[0] -> c[0];", True),
    ("for over a range with a negative step", "qubit[3] q; bit[3] c; for int i in [2:-1:0] { rx(0.1 * (i + 1)) q[i]; } c = measure q;",
     "qreg q[3]; creg c[3]; rx(0.3) q[2]; rx(0.2) q[1]; rx(0.1) q[0]; measure q -> c;", True),
    ("for over a set", "qubit[3] q; bit[3] c; for uint i in {2, 0} { x q[i]; } c = measure q;",
     "qreg q[3]; creg c[3]; x q[2]; x q[0]; measure q -> c;", True),
    ("if on known values with else", "const int k = 2; qubit q; bit c; if (k > 3) { x q; } else { h q; } if (k == 2) s q; c = measure q;",
     "qreg q[1]; creg c[1]; h q[0]; s q[0]; measure q[0] -> c[0];", True),
    ("compound assignment", "int x = 1; x += 2; x *= 3; x <<= 1; qubit q; bit c; rx(x / 4) q; c = measure q;",
     "qreg q[1]; creg c[1]; rx(4) q[0]; measure q[0] -> c[0];", True),
    ("if on a measured register", "qubit[2] q; bit[2] c; h q[0]; c[0] = measure q[0]; if (c == 1) x q[1]; c[1] = measure q[1];",
     "qreg q[2]; creg c[2]; h q[0]; measure q[0] -> c[0]; if(c==1) x q[1]; measure q[1] -> c[1];", True),
    ("if on a measured bit", "qubit[2] q; bit c0; bit c1; h q[0]; c0 = measure q[0]; if (c0) { x q[1]; } c1 = measure q[1];",
     "qreg q[2]; creg c0[1]; creg c1[1]; h q[0]; measure q[0] -> c0[0]; if(c0==1) x q[1]; measure q[1] -> c1[0];", True),
    ("if/else on a measured bit of a register", "qubit[2] q; bit[2] c; h q[0]; c[0] = measure q[0]; if (c[0] == 1) { x q[1]; } else { h q[1]; } c[1] = measure q[1];",
     "qreg q[2]; creg c[2]; h q[0]; measure q[0] -> c[0]; if(c==1) x q[1]; if(c==3) x q[1]; if(c==0) h q[1]; if(c==2) h q[1]; measure q[1] -> c[1];", True),
    ("if with negation", "qubit[2] q; bit b; bit d; h q[0]; b = measure q[0]; if (!b) x q[1]; d = measure q[1];",
     "qreg q[2]; creg b[1]; creg d[1]; h q[0]; measure q[0] -> b[0]; if(b==0) x q[1]; measure q[1] -> d[0];", True),
    # int[2] would be signed (10 and 11 are -2 and -1), so the test uses uint[2].
    ("cast of a measured register", "qubit[3] q; bit[2] c; bit r; h q[0]; h q[1]; c = measure q[0:1]; if (uint[2](c) >= 2) x q[2]; r = measure q[2];",
     "qreg q[3]; creg c[2]; creg r[1]; h q[0]; h q[1]; measure q[0] -> c[0]; measure q[1] -> c[1]; if(c==2) x q[2]; if(c==3) x q[2]; measure q[2] -> r[0];", True),
    ("modifiers", "qubit[3] q; bit[3] c; h q; ctrl @ s q[0], q[1]; inv @ t q[2]; ctrl(2) @ x q[0], q[1], q[2]; h q; c = measure q;",
     "qreg q[3]; creg c[3]; h q; cp(pi/2) q[0],q[1]; tdg q[2]; ccx q[0],q[1],q[2]; h q; measure q -> c;", True),
    ("pow by a real exponent", "qubit q; bit c; pow(0.5) @ x q; c = measure q;",
     "qreg q[1]; creg c[1]; sx q[0]; measure q[0] -> c[0];", False),
    ("gphase and U", "qubit[2] q; bit[2] c; h q; U(0.1, 0.2, 0.3) q[0]; ctrl @ gphase(0.4) q[1]; gphase(1.0); h q; c = measure q;",
     "qreg q[2]; creg c[2]; h q; U(0.1,0.2,0.3) q[0]; p(0.4) q[1]; h q; measure q -> c;", True),
    ("output ignored", "output bit[1] c; qubit q; x q; c[0] = measure q;",
     "qreg q[1]; creg c[1]; x q[0]; measure q[0] -> c[0];", True),
    ("no version line", None, None, True),
]  # fmt: skip


@pytest.mark.parametrize(("feature", "three", "two", "same_ops"), [t for t in TWINS if t[1]])
def test_twins_agree(feature: str, three: str, two: str, same_ops: bool) -> None:
    c3 = parse_qasm(H3 + three)
    c2 = parse_qasm(H2 + two)
    assert tvd(exact(c3), exact(c2)) < TOL, feature
    if same_ops:
        assert circuit_hash(c3) == circuit_hash(c2), feature


def test_no_version_line_means_openqasm_3() -> None:
    body = 'include "stdgates.inc"; qubit q; bit c; x q; c = measure q;'
    assert circuit_hash(parse_qasm(body)) == circuit_hash(parse_qasm(H3 + body))
    assert circuit_hash(parse_qasm("OPENQASM 3;\n" + body)) == circuit_hash(parse_qasm(body))


@pytest.mark.parametrize(
    ("body", "words"),
    [
        ("qubit q; delay[100ns] q;", "delay is not supported"),
        ("qubit q; box { x q; }", "box is not supported"),
        ("stretch s;", "stretch is not supported"),
        ("duration d = 10ns;", "duration is not supported"),
        ("cal { }", "cal is not supported"),
        ("defcal x $0 { }", "defcal is not supported"),
        ('defcalgrammar "openpulse";', "defcalgrammar is not supported"),
        ("extern f(int) -> int;", "extern is not supported"),
        ("def f() { }", "def (subroutines) is not supported"),
        ("qubit q; bit c; while (c == 0) { c = measure q; }", "while is not supported"),
        ("array[int[8], 4] a;", "array is not supported"),
        ("qubit q; x $0;", "physical qubits ($n) is not supported"),
        ("angle[8] a;", "angle (as a variable type"),
        (
            "qubit q; bit[2] c; bit[2] d; if (c == 1 && d == 1) x q;",
            "more than one bit register is not supported",
        ),
        (
            "qubit q; bit c; if (c == 1) { c = measure q; }",
            "measuring into a bit the enclosing if reads is not supported",
        ),
        ('include "other.inc";', 'include "other.inc" (only "stdgates.inc") is not supported'),
        ("qubit q; measure q;", "measure without a target bit is not supported"),
        ("qubit q; let a = q;", "let (aliases) is not supported"),
        ("switch (1) { case 1 { } }", "switch is not supported"),
    ],
)
def test_features_outside_the_subset_are_named(body: str, words: str) -> None:
    with pytest.raises(CircuitError) as err:
        parse_qasm(H3 + body, filename="prog.qasm")
    assert words in str(err.value)
    assert str(err.value).startswith("prog.qasm:")
    assert err.value.line is not None and err.value.column is not None
