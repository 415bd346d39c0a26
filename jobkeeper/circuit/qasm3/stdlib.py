"""``stdgates.inc``, the OpenQASM 3 standard gate library, built in: ``include
"stdgates.inc";`` means this text, never a file on disk.

The gate definitions are copied unchanged (comments left out) from the specification's
repository, openqasm/openqasm at commit 45977e1, ``examples/stdgates.inc``
(Apache-2.0; the copy is in ../shared/corpus/qasm3/examples/stdgates.inc). They give
each gate its meaning when a modifier has to expand it; an unmodified call of one of
these gates becomes one IR operation of the same name (see :mod:`.modifiers`).
"""

from __future__ import annotations

from jobkeeper.circuit.qasm3 import nodes as n
from jobkeeper.circuit.qasm3.syntax import parse_program

STDGATES = """
gate p(λ) a { ctrl @ gphase(λ) a; }
gate x a { U(π, 0, π) a; gphase(-π/2);}
gate y a { U(π, π/2, π/2) a; gphase(-π/2);}
gate z a { p(π) a; }
gate h a { U(π/2, 0, π) a; gphase(-π/4);}
gate s a { pow(0.5) @ z a; }
gate sdg a { inv @ pow(0.5) @ z a; }
gate t a { pow(0.5) @ s a; }
gate tdg a { inv @ pow(0.5) @ s a; }
gate sx a { pow(0.5) @ x a; }
gate rx(θ) a { U(θ, -π/2, π/2) a; gphase(-θ/2);}
gate ry(θ) a { U(θ, 0, 0) a; gphase(-θ/2);}
gate rz(λ) a { gphase(-λ/2); U(0, 0, λ) a; }
gate cx a, b { ctrl @ x a, b; }
gate cy a, b { ctrl @ y a, b; }
gate cz a, b { ctrl @ z a, b; }
gate cp(λ) a, b { ctrl @ p(λ) a, b; }
gate crx(θ) a, b { ctrl @ rx(θ) a, b; }
gate cry(θ) a, b { ctrl @ ry(θ) a, b; }
gate crz(θ) a, b { ctrl @ rz(θ) a, b; }
gate ch a, b { ctrl @ h a, b; }
gate swap a, b { cx a, b; cx b, a; cx a, b; }
gate ccx a, b, c { ctrl @ ctrl @ x a, b, c; }
gate cswap a, b, c { ctrl @ swap a, b, c; }
gate cu(θ, φ, λ, γ) a, b { p(γ-θ/2) a; ctrl @ U(θ, φ, λ) a, b; }
gate CX a, b { ctrl @ U(π, 0, π) a, b; }
gate phase(λ) q { U(0, 0, λ) q; }
gate cphase(λ) a, b { ctrl @ phase(λ) a, b; }
gate id a { U(0, 0, 0) a; }
gate u1(λ) q { U(0, 0, λ) q; }
gate u2(φ, λ) q { gphase(-(φ+λ+π/2)/2); U(π/2, φ, λ) q; }
gate u3(θ, φ, λ) q { gphase(-(φ+λ+θ)/2); U(θ, φ, λ) q; }
"""


def _load() -> dict[str, n.GateDef]:
    gates: dict[str, n.GateDef] = {}
    for stmt in parse_program(STDGATES, "<stdgates.inc>"):
        assert isinstance(stmt, n.GateDef)
        gates[stmt.name.text] = stmt
    return gates


#: The library's gates by name, in the library's order.
STANDARD_LIBRARY: dict[str, n.GateDef] = _load()
