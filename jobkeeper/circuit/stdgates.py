"""The standard gate set, as OpenQASM text parsed once at import.

``include "qelib1.inc";`` means this header, never a file on disk: circuits include it by
bare name and the file beside them (if any) differs between sources and versions.

Sources:

* ``QELIB1``: the gate definitions of the OpenQASM 2.0 standard header as published in
  A. W. Cross, L. S. Bishop, J. A. Smolin, J. M. Gambetta, "Open Quantum Assembly
  Language", arXiv:1707.03429, and in the openqasm repository's ``qelib1.inc`` (its
  copy is in ../shared/corpus/qasm/openqasm/examples/qelib1.inc). ``cu3`` keeps the
  original body, without the later ``u1((lambda+phi)/2) c`` term: that term changes the
  gate's meaning (a phase on the control), and programs written for this header expect
  the original.
* ``EXTENSIONS``: gates of later, widely used headers. u0 ... c3sqrtx are copied from
  the QASMBench ``qelib1.inc``; p, u, sx, sxdg, cp, csx and the 4-parameter cu are
  written in terms of the other gates as those later headers do. They exist only where
  a program does not define a gate of the same name itself (the parser sees to that).

``c4x``: the QASMBench body is not a 4-controlled X (its second controlled root acts on
the control ``d`` through ``h d``, with angle pi/4 instead of pi/2), so no program can
mean that body. The name and the header's own comment say "4-controlled X gate", so that
is what ``c4x`` means here, built the same way: with A = sqrt(X)^dagger as in c3sqrtx,
C4X = C3-A(a,b,c;e) . C3X(a,b,c;d) . C-A^dagger(d;e) . C3X(a,b,c;d) . C-A(d;e) (rightmost
first), checked against the 32x32 matrix in tests/unit/test_circuit_parser.py.
"""

from __future__ import annotations

from jobkeeper.circuit.gates import GateSpec, parse_gate_definition
from jobkeeper.circuit.lexer import Token, TokenStream, tokenize

QELIB1 = """
gate u3(theta,phi,lambda) q { U(theta,phi,lambda) q; }
gate u2(phi,lambda) q { U(pi/2,phi,lambda) q; }
gate u1(lambda) q { U(0,0,lambda) q; }
gate cx c,t { CX c,t; }
gate id a { U(0,0,0) a; }
gate x a { u3(pi,0,pi) a; }
gate y a { u3(pi,pi/2,pi/2) a; }
gate z a { u1(pi) a; }
gate h a { u2(0,pi) a; }
gate s a { u1(pi/2) a; }
gate sdg a { u1(-pi/2) a; }
gate t a { u1(pi/4) a; }
gate tdg a { u1(-pi/4) a; }
gate rx(theta) a { u3(theta,-pi/2,pi/2) a; }
gate ry(theta) a { u3(theta,0,0) a; }
gate rz(phi) a { u1(phi) a; }
gate cz a,b { h b; cx a,b; h b; }
gate cy a,b { sdg b; cx a,b; s b; }
gate ch a,b { h b; sdg b; cx a,b; h b; t b; cx a,b; t b; h b; s b; x b; s a; }
gate ccx a,b,c
{
  h c; cx b,c; tdg c; cx a,c; t c; cx b,c; tdg c;
  cx a,c; t b; t c; h c; cx a,b; t a; tdg b; cx a,b;
}
gate crz(lambda) a,b { u1(lambda/2) b; cx a,b; u1(-lambda/2) b; cx a,b; }
gate cu1(lambda) a,b { u1(lambda/2) a; cx a,b; u1(-lambda/2) b; cx a,b; u1(lambda/2) b; }
gate cu3(theta,phi,lambda) c,t
{
  u1((lambda-phi)/2) t; cx c,t; u3(-theta/2,0,-(phi+lambda)/2) t; cx c,t; u3(theta/2,phi,0) t;
}
"""

EXTENSIONS = """
gate u0(gamma) q { U(0,0,0) q; }
gate swap a,b { cx a,b; cx b,a; cx a,b; }
gate cswap a,b,c { cx c,b; ccx a,b,c; cx c,b; }
gate crx(lambda) a,b
{
  u1(pi/2) b; cx a,b; u3(-lambda/2,0,0) b; cx a,b; u3(lambda/2,-pi/2,0) b;
}
gate cry(lambda) a,b { u3(lambda/2,0,0) b; cx a,b; u3(-lambda/2,0,0) b; cx a,b; }
gate rxx(theta) a,b
{
  u3(pi/2,theta,0) a; h b; cx a,b; u1(-theta) b; cx a,b; h b; u2(-pi,pi-theta) a;
}
gate rzz(theta) a,b { cx a,b; u1(theta) b; cx a,b; }
gate rccx a,b,c
{
  u2(0,pi) c; u1(pi/4) c; cx b,c; u1(-pi/4) c; cx a,c; u1(pi/4) c; cx b,c; u1(-pi/4) c;
  u2(0,pi) c;
}
gate rc3x a,b,c,d
{
  u2(0,pi) d; u1(pi/4) d; cx c,d; u1(-pi/4) d; u2(0,pi) d; cx a,d; u1(pi/4) d; cx b,d;
  u1(-pi/4) d; cx a,d; u1(pi/4) d; cx b,d; u1(-pi/4) d; u2(0,pi) d; u1(pi/4) d; cx c,d;
  u1(-pi/4) d; u2(0,pi) d;
}
gate c3x a,b,c,d
{
  h d; cu1(-pi/4) a,d; h d; cx a,b; h d; cu1(pi/4) b,d; h d; cx a,b;
  h d; cu1(-pi/4) b,d; h d; cx b,c; h d; cu1(pi/4) c,d; h d; cx a,c;
  h d; cu1(-pi/4) c,d; h d; cx b,c; h d; cu1(pi/4) c,d; h d; cx a,c;
  h d; cu1(-pi/4) c,d; h d;
}
gate c3sqrtx a,b,c,d
{
  h d; cu1(-pi/8) a,d; h d; cx a,b; h d; cu1(pi/8) b,d; h d; cx a,b;
  h d; cu1(-pi/8) b,d; h d; cx b,c; h d; cu1(pi/8) c,d; h d; cx a,c;
  h d; cu1(-pi/8) c,d; h d; cx b,c; h d; cu1(pi/8) c,d; h d; cx a,c;
  h d; cu1(-pi/8) c,d; h d;
}
gate c4x a,b,c,d,e
{
  h e; cu1(-pi/2) d,e; h e; c3x a,b,c,d; h e; cu1(pi/2) d,e; h e; c3x a,b,c,d;
  c3sqrtx a,b,c,e;
}
gate p(lambda) q { u1(lambda) q; }
gate u(theta,phi,lambda) q { U(theta,phi,lambda) q; }
gate sx a { sdg a; h a; sdg a; }
gate sxdg a { s a; h a; s a; }
gate cp(lambda) a,b { cu1(lambda) a,b; }
gate csx c,t { h t; cu1(pi/2) c,t; h t; }
gate cu(theta,phi,lambda,gamma) c,t
{
  p(gamma) c; p((lambda+phi)/2) c; p((lambda-phi)/2) t; cx c,t;
  u(-theta/2,0,-(phi+lambda)/2) t; cx c,t; u(theta/2,phi,0) t;
}
"""


def _load(text: str, into: dict[str, GateSpec], *, extension: bool) -> None:
    stream = TokenStream(tokenize(text, "<qelib1.inc>"), "<qelib1.inc>")

    def lookup(tok: Token) -> GateSpec:
        if tok.text not in into:
            stream.fail(f"undefined gate '{tok.text}'", tok)
        return into[tok.text]

    while stream.peek().kind != "eof":
        keyword = stream.expect("gate")
        spec = parse_gate_definition(stream, keyword, lookup, standard=True, extension=extension)
        into[spec.name] = spec


def _build() -> dict[str, GateSpec]:
    gates: dict[str, GateSpec] = {}
    _load(QELIB1, gates, extension=False)
    _load(EXTENSIONS, gates, extension=True)
    return gates


#: Every standard gate by name: the original header's gates, then the extensions.
STANDARD_GATES: dict[str, GateSpec] = _build()
#: The gates of the original OpenQASM 2.0 header; a program may not redefine these
#: once it has included the header.
ORIGINAL_GATES = frozenset(name for name, spec in STANDARD_GATES.items() if not spec.extension)

Primitive = tuple[str, tuple[int, ...], tuple[float, ...]]


def expand_standard(name: str, params: tuple[float, ...] | list[float]) -> list[Primitive]:
    """A standard gate expanded by its published definition down to the builtins: a list
    of ``("U", (position,), (theta, phi, lambda))`` and ``("CX", (control, target), ())``,
    positions counting the gate's qubit arguments from 0. Parameters keep full precision.
    """
    spec = STANDARD_GATES[name]
    if len(params) != spec.num_params:
        raise ValueError(f"gate '{name}' takes {spec.num_params} parameter(s)")
    out: list[Primitive] = []
    _expand(spec, tuple(float(p) for p in params), tuple(range(spec.num_qubits)), out)
    return out


def _expand(
    spec: GateSpec, env: tuple[float, ...], qubits: tuple[int, ...], out: list[Primitive]
) -> None:
    # The header nests at most five levels (c4x > c3x > cu1 > u1 > U): recursion is safe.
    assert spec.body is not None
    for op in spec.body:
        mapped = tuple(qubits[i] for i in op.qubits)
        values = tuple(p.evaluate(env) for p in op.params)
        if op.name in ("U", "CX"):
            out.append((op.name, mapped, values))
        elif op.target is not None:
            _expand(op.target, values, mapped, out)
