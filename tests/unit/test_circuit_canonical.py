"""Canonical text and circuit hash: what must not change the hash, and what must."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, replace

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from jobkeeper.circuit import (
    Circuit,
    Operation,
    Register,
    canonical_text,
    circuit_hash,
    metrics,
    parse_qasm,
)
from jobkeeper.circuit.canonical import format_param, round_param
from jobkeeper.circuit.gates import RESERVED
from jobkeeper.circuit.stdgates import STANDARD_GATES
from jobkeeper.exceptions import CircuitError

SETTINGS = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])

# ---- a model of random valid programs -------------------------------------------------

#: standard gates the generator uses, by (parameters, qubits); two or more per arity so a
#: name can be swapped for another of the same shape.
POOL = ["h", "x", "sdg", "sx", "rz", "ry", "u2", "u3", "cx", "cz", "swap", "cu1", "crz",
        "rzz", "ccx", "cswap", "cu"]  # fmt: skip
ARITY = {name: (STANDARD_GATES[name].num_params, STANDARD_GATES[name].num_qubits) for name in POOL}
Angle = tuple[int, int]  # num, den: the value num*pi/den


@dataclass(frozen=True)
class UserGate:
    n_params: int
    n_qubits: int
    # (standard gate, qubit positions, [(param index or -1, angle)])
    body: tuple[tuple[str, tuple[int, ...], tuple[tuple[int, Angle], ...]], ...]


@dataclass(frozen=True)
class Program:
    qsizes: tuple[int, ...]
    csizes: tuple[int, ...]
    gates: tuple[UserGate, ...]
    stmts: tuple[tuple[object, ...], ...]
    #: (parameters, qubits) of opaque gates named zap0, zap1 (names matter: not renamed)
    opaque: tuple[tuple[int, int], ...] = ()

    @property
    def n_qubits(self) -> int:
        return sum(self.qsizes)


angles = st.tuples(st.integers(-16, 16), st.sampled_from([1, 2, 3, 4, 6, 8, 16]))


@st.composite
def user_gates(draw: st.DrawFn) -> UserGate:
    n_params = draw(st.integers(0, 2))
    n_qubits = draw(st.integers(1, 3))
    body = []
    for _ in range(draw(st.integers(1, 4))):
        name = draw(st.sampled_from([g for g in POOL if ARITY[g][1] <= n_qubits]))
        n_p, n_q = ARITY[name]
        qubits = tuple(draw(st.permutations(range(n_qubits)))[:n_q])
        params = tuple((draw(st.integers(-1, n_params - 1)), draw(angles)) for _ in range(n_p))
        body.append((name, qubits, params))
    return UserGate(n_params, n_qubits, tuple(body))


@st.composite
def programs(draw: st.DrawFn) -> Program:
    qsizes = tuple(draw(st.lists(st.integers(1, 3), min_size=1, max_size=3)))
    csizes = tuple(draw(st.lists(st.integers(1, 3), max_size=2)))
    n = sum(qsizes)
    gates = tuple(g for g in draw(st.lists(user_gates(), max_size=2)) if g.n_qubits <= n)
    stmts: list[tuple[object, ...]] = []
    opaque = tuple(
        (draw(st.integers(0, 2)), draw(st.integers(1, n))) for _ in range(draw(st.integers(0, 2)))
    )
    choices = ["std", "std", "bcast", "barrier", "reset"]
    choices += ["user"] * bool(gates) + ["measure", "if"] * bool(csizes) + ["opaque"] * bool(opaque)
    for _ in range(draw(st.integers(1, 12))):
        kind = draw(st.sampled_from(choices))
        if kind in ("std", "if"):
            name = draw(st.sampled_from([g for g in POOL if ARITY[g][1] <= n]))
            n_p, n_q = ARITY[name]
            stmt: tuple[object, ...] = (
                "std",
                name,
                tuple(draw(angles) for _ in range(n_p)),
                tuple(draw(st.permutations(range(n)))[:n_q]),
            )
            if kind == "if":
                reg = draw(st.integers(0, len(csizes) - 1))
                stmt = ("if", reg, draw(st.integers(0, (1 << csizes[reg]) - 1)), stmt)
        elif kind == "user":
            k = draw(st.integers(0, len(gates) - 1))
            g = gates[k]
            stmt = (
                "user",
                k,
                tuple(draw(angles) for _ in range(g.n_params)),
                tuple(draw(st.permutations(range(n)))[: g.n_qubits]),
            )
        elif kind == "opaque":
            k = draw(st.integers(0, len(opaque) - 1))
            n_p, n_q = opaque[k]
            stmt = (
                "opaque",
                k,
                tuple(draw(angles) for _ in range(n_p)),
                tuple(draw(st.permutations(range(n)))[:n_q]),
            )
        elif kind == "bcast":
            stmt = (
                "bcast",
                draw(st.sampled_from(["h", "x", "sx"])),
                draw(st.integers(0, len(qsizes) - 1)),
            )
        elif kind == "barrier":
            stmt = ("barrier", tuple(sorted(draw(st.sets(st.integers(0, n - 1), min_size=1)))))
        elif kind == "reset":
            stmt = ("reset", draw(st.integers(0, n - 1)))
        else:
            stmt = ("measure", draw(st.integers(0, n - 1)), draw(st.integers(0, sum(csizes) - 1)))
        stmts.append(stmt)
    return Program(qsizes, csizes, gates, tuple(stmts), opaque)


@dataclass(frozen=True)
class Style:
    qnames: tuple[str, ...] = ("q0", "q1", "q2")
    cnames: tuple[str, ...] = ("c0", "c1")
    gnames: tuple[str, ...] = ("g0", "g1")
    pnames: tuple[str, ...] = ("t0", "t1")
    number_form: int = 0
    space: str = " "
    newline: str = "\n"
    comments: bool = False
    expand_broadcast: bool = False


def angle_text(a: Angle, form: int) -> str:
    num, den = a
    forms = [
        f"{num}*pi/{den}",
        f"pi*({num})/{den}",
        repr(num * math.pi / den),
        f"{num}*(pi/{den})",
        f"({num}/{den})*pi",
    ]
    return forms[form % len(forms)]


def render(p: Program, s: Style) -> str:
    sp, nl = s.space, s.newline
    starts = [sum(p.qsizes[:k]) for k in range(len(p.qsizes))]
    cstarts = [sum(p.csizes[:k]) for k in range(len(p.csizes))]

    def qubit(i: int) -> str:
        k = max(k for k in range(len(starts)) if starts[k] <= i)
        return f"{s.qnames[k]}[{i - starts[k]}]"

    def bit(i: int) -> str:
        k = max(k for k in range(len(cstarts)) if cstarts[k] <= i)
        return f"{s.cnames[k]}{sp}[{i - cstarts[k]}]"

    def call(name: str, params: list[str], args: list[str]) -> str:
        ptext = f"({','.join(params)})" if params else ""
        return f"{name}{ptext}{sp}{(',' + sp).join(args)};"

    out = ["OPENQASM 2.0;", 'include "qelib1.inc";']
    if s.comments:
        out.append("// a comment; with { punctuation } and qreg words")
    out += [f"qreg {s.qnames[k]}[{size}];" for k, size in enumerate(p.qsizes)]
    out += [f"creg {s.cnames[k]}[{size}];" for k, size in enumerate(p.csizes)]
    for k, (n_p, n_q) in enumerate(p.opaque):
        params = f"({','.join(s.pnames[:n_p])})" if n_p else ""
        out.append(f"opaque zap{k}{params} {','.join(f'a{j}' for j in range(n_q))};")
    for k, g in enumerate(p.gates):
        pn = s.pnames[: g.n_params]
        qn = [f"a{j}" for j in range(g.n_qubits)]
        head = f"gate {s.gnames[k]}" + (f"({','.join(pn)})" if pn else "") + f" {','.join(qn)}"
        body = []
        for name, qubits, params in g.body:
            texts = [
                (f"{pn[i]}+" if i >= 0 else "") + f"({angle_text(a, s.number_form)})"
                for i, a in params
            ]
            body.append(call(name, texts, [qn[j] for j in qubits]))
        out.append(head + f"{sp}{{{nl}" + nl.join(body) + f"{nl}}}")
    for stmt in p.stmts:
        out.extend(statement(stmt, s, qubit, bit, call, starts, p))
    text = nl.join(out) + nl
    if s.comments:
        text = text.replace(";" + nl, "; // trailing" + nl)
    return text


def statement(stmt, s, qubit, bit, call, starts, p) -> list[str]:  # type: ignore[no-untyped-def]
    kind = stmt[0]
    if kind == "std":
        _, name, params, qubits = stmt
        return [
            call(name, [angle_text(a, s.number_form) for a in params], [qubit(i) for i in qubits])
        ]
    if kind == "opaque":
        _, k, params, qubits = stmt
        return [
            call(
                f"zap{k}",
                [angle_text(a, s.number_form) for a in params],
                [qubit(i) for i in qubits],
            )
        ]
    if kind == "user":
        _, k, params, qubits = stmt
        return [
            call(
                s.gnames[k],
                [angle_text(a, s.number_form) for a in params],
                [qubit(i) for i in qubits],
            )
        ]
    if kind == "bcast":
        _, name, reg = stmt
        if s.expand_broadcast:
            return [call(name, [], [qubit(starts[reg] + j)]) for j in range(p.qsizes[reg])]
        return [call(name, [], [s.qnames[reg]])]
    if kind == "barrier":
        return [call("barrier", [], [qubit(i) for i in stmt[1]])]
    if kind == "reset":
        return [call("reset", [], [qubit(stmt[1])])]
    if kind == "measure":
        return [f"measure {qubit(stmt[1])}{s.space}->{s.space}{bit(stmt[2])};"]
    _, reg, value, inner = stmt
    return [
        f"if({s.cnames[reg]}{s.space}=={s.space}{value}){s.space}" + line
        for line in statement(inner, s, qubit, bit, call, starts, p)
    ]


identifiers = st.from_regex(r"[a-z][a-z0-9_]{0,5}", fullmatch=True).filter(
    lambda w: w not in RESERVED and w not in STANDARD_GATES and not re.fullmatch(r"(a|zap)\d", w)
)


@st.composite
def styles(draw: st.DrawFn) -> Style:
    names = draw(st.lists(identifiers, min_size=9, max_size=9, unique=True))
    return Style(
        qnames=tuple(names[0:3]),
        cnames=tuple(names[3:5]),
        gnames=tuple(names[5:7]),
        pnames=tuple(names[7:9]),
        number_form=draw(st.integers(0, 4)),
        space=draw(st.sampled_from([" ", "  ", "\t", " \n ", "\r\n"])),
        newline=draw(st.sampled_from(["\n", "\r\n", "\n\n"])),
        comments=draw(st.booleans()),
        expand_broadcast=draw(st.booleans()),
    )


def hash_of(p: Program, s: Style = Style()) -> str:
    return circuit_hash(parse_qasm(render(p, s)))


# ---- properties ----------------------------------------------------------------------


@SETTINGS
@given(programs(), styles())
def test_names_layout_and_number_spelling_keep_the_hash(p: Program, s: Style) -> None:
    assert hash_of(p, s) == hash_of(p)


@SETTINGS
@given(programs())
def test_canonical_text_round_trips(p: Program) -> None:
    circuit = parse_qasm(render(p, Style()))
    text = canonical_text(circuit)
    again = parse_qasm(text)
    assert again.operations == circuit.operations
    assert again.opaque_signatures == circuit.opaque_signatures
    assert [(r.size, r.offset) for r in again.cregs] == [(r.size, r.offset) for r in circuit.cregs]
    assert canonical_text(again) == text


@st.composite
def mutations(draw: st.DrawFn) -> tuple[Program, Program]:
    """A program and a copy with one operation, operand or parameter changed."""
    p = draw(programs())
    n = p.n_qubits
    stmts = list(p.stmts)
    i = draw(st.integers(0, len(stmts) - 1))
    stmt = stmts[i]
    inner = stmt[3] if stmt[0] == "if" else stmt
    options = ["delete"]
    if inner[0] == "std":
        name, params, qubits = inner[1], inner[2], inner[3]
        same_shape = [g for g in POOL if g != name and ARITY[g][1] == len(qubits)]  # type: ignore[arg-type]
        options += ["name"] * bool(same_shape) + ["param"] * bool(params)
        options += ["operand"] * (len(qubits) < n) + ["order"] * (len(qubits) > 1)  # type: ignore[arg-type]
    if stmt[0] == "if":
        options.append("value")
    if stmt[0] in ("measure", "reset") and n > 1:
        options.append("qubit")
    if stmt[0] == "measure" and sum(p.csizes) > 1:
        options.append("bit")
    kind = draw(st.sampled_from(options))
    if kind == "delete":
        del stmts[i]
    elif kind == "value":
        stmts[i] = (stmt[0], stmt[1], stmt[2] + 1, stmt[3])  # type: ignore[operator]
    elif kind == "qubit":
        stmts[i] = (stmt[0], (stmt[1] + 1) % n, *stmt[2:])  # type: ignore[operator]
    elif kind == "bit":
        stmts[i] = (stmt[0], stmt[1], (stmt[2] + 1) % sum(p.csizes))  # type: ignore[operator]
    else:
        _, name, params, qubits = inner
        if kind == "name":
            name = draw(st.sampled_from(same_shape))
            params = tuple(draw(angles) for _ in range(ARITY[name][0]))  # type: ignore[index]
        elif kind == "param":
            j = draw(st.integers(0, len(params) - 1))  # type: ignore[arg-type]
            num, den = params[j]  # type: ignore[index]
            params = (*params[:j], (num + 1, den), *params[j + 1 :])  # type: ignore[index]
        elif kind == "operand":
            j = draw(st.integers(0, len(qubits) - 1))  # type: ignore[arg-type]
            free = [q for q in range(n) if q not in qubits]  # type: ignore[operator]
            qubits = (*qubits[:j], draw(st.sampled_from(free)), *qubits[j + 1 :])  # type: ignore[index]
        else:
            qubits = tuple(reversed(qubits))  # type: ignore[call-overload]
        new = ("std", name, params, qubits)
        stmts[i] = (*stmt[:3], new) if stmt[0] == "if" else new
    return p, replace(p, stmts=tuple(stmts))


@SETTINGS
@given(mutations(), styles())
def test_any_change_of_an_operation_changes_the_hash(
    pair: tuple[Program, Program], s: Style
) -> None:
    before, after = pair
    assert hash_of(before, s) != hash_of(after)


def test_qreg_split_and_gate_definitions_do_not_matter() -> None:
    head = 'OPENQASM 2.0;\ninclude "qelib1.inc";\n'
    one = head + "qreg q[3];\ncreg c[2];\nh q[0];\ncx q[0],q[2];\nmeasure q[2] -> c[1];\n"
    split = head + (
        "qreg a[1];\nqreg b[2];\ncreg out[2];\ngate bell x,y { h x; cx x,y; }\n"
        "bell a[0], b[1];\nmeasure b[1] -> out[1];\n"
    )
    assert circuit_hash(parse_qasm(one)) == circuit_hash(parse_qasm(split))
    other_cregs = head + (
        "qreg q[3];\ncreg c[1];\ncreg d[1];\nh q[0];\ncx q[0],q[2];\nmeasure q[2] -> d[0];\n"
    )
    # creg layout decides how count bit strings are written (DESIGN §4): it is kept.
    assert circuit_hash(parse_qasm(other_cregs)) != circuit_hash(parse_qasm(one))


def test_canonical_text_format() -> None:
    text = (
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nopaque zap(a) x;\nqreg a[1];\nqreg b[2];\n'
        "creg x[2];\ncreg y[1];\nrz(-pi/2) b[0];\nu3(0.00001, 1e16, -0.0) a[0];\nzap(1) b[1];\n"
        "barrier b, a;\nif(x==3) measure b[1] -> y[0];\nreset a[0];\n"
    )
    assert canonical_text(parse_qasm(text)) == (
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nopaque zap(p0) a0;\nqreg q[3];\n'
        "creg c0[2];\ncreg c1[1];\nrz(-1.57079632679) q[1];\n"
        "u3(1.0e-05,1.0e+16,0.0) q[0];\nzap(1.0) q[2];\nbarrier q[0],q[1],q[2];\n"
        "if(c0==3) measure q[2] -> c1[0];\nreset q[0];\n"
    )


def test_number_format() -> None:
    # Twelve significant digits, a decimal point always (OpenQASM 2.0 reals need it,
    # arXiv:1707.03429 grammar "real"), -0.0 as 0.0.
    assert format_param(math.pi / 2) == "1.57079632679"
    assert format_param(1.5707963267948966) == format_param(math.pi / 2)
    assert format_param(-0.0) == "0.0"
    assert format_param(3) == "3.0"
    assert format_param(1e-5) == "1.0e-05"
    assert format_param(1.5e300) == "1.5e+300"
    assert format_param(0.1 + 0.2) == "0.3"
    assert round_param(-1e-300 * 1e-300) == 0.0
    assert re.fullmatch(r"-?\d+\.\d+(e[-+]\d+)?", format_param(-123456789.123456789))
    with pytest.raises(CircuitError):
        format_param(math.inf)


def test_circuits_built_in_code() -> None:
    circuit = Circuit(
        num_qubits=2,
        num_clbits=1,
        qregs=(Register("x", 2, 0),),
        cregs=(Register("m", 1, 0),),
        operations=(Operation("h", (0,)), Operation("rz", (1,), (math.pi / 3,))),
    )
    text = canonical_text(circuit)
    assert "rz(1.0471975512) q[1];" in text
    assert circuit_hash(circuit).startswith("sha256:") and len(circuit_hash(circuit)) == 71
    for bad in (Operation("nope", (0,)), Operation("h", (5,)), Operation("cx", (0,))):
        with pytest.raises(CircuitError):
            canonical_text(replace(circuit, operations=(bad,)))
    assert metrics(circuit).depth == 1
