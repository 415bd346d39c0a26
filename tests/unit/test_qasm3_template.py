"""Templates: an OpenQASM 3 program with ``input`` parameters, parsed once, bound many
times. A bound template is the same circuit (canonical text, hash, counts) as its
literal twin, the program with the values written in (issue 14, item 2)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from jobkeeper.backend import Task
from jobkeeper.backends.sim.statevector import StatevectorBackend
from jobkeeper.circuit import (
    Template,
    canonical_text,
    circuit_hash,
    load_template,
    parse_qasm,
    parse_template,
)
from jobkeeper.exceptions import CircuitError

H3 = 'OPENQASM 3.0;\ninclude "stdgates.inc";\n'
PROGRAM = H3 + (
    "input float[64] theta;\ninput angle phi;\nqubit[2] q;\nbit[2] c;\n"
    "rx(theta) q[0];\nctrl @ rz(phi / 2) q[0], q[1];\nc = measure q;\n"
)


def test_bind_gives_the_literal_twin() -> None:
    template = Template(PROGRAM)
    assert template.inputs == {"theta": "float", "phi": "angle"}
    twin = parse_qasm(
        H3
        + "qubit[2] q;\nbit[2] c;\nrx(0.3) q[0];\nctrl @ rz(1.1 / 2) q[0], q[1];\nc = measure q;\n"
    )
    bound = template.bind({"theta": 0.3, "phi": 1.1})
    assert canonical_text(bound) == canonical_text(twin)
    assert bound.source_hash == template.source_hash


def test_one_template_many_bindings() -> None:
    template = Template(PROGRAM)
    hashes = {circuit_hash(template.bind({"theta": t / 10, "phi": 0.0})) for t in range(20)}
    assert len(hashes) == 20


def test_inputs_may_steer_loops_and_conditions() -> None:
    text = H3 + "input int n;\nqubit[4] q;\nfor int i in [0:n - 1] { x q[i]; }\n"
    template = Template(text)
    assert len(template.bind({"n": 3}).operations) == 3
    with pytest.raises(CircuitError, match="use a cast"):
        template.bind({"n": 2.5})


@pytest.mark.parametrize(
    ("values", "words"),
    [
        ({}, "input(s) without a value: phi, theta"),
        ({"theta": 1.0}, "input(s) without a value: phi"),
        ({"theta": 1.0, "phi": 1.0, "gamma": 2.0}, "no input named gamma (the program's inputs: phi, theta)"),
        ({"theta": math.nan, "phi": 1.0}, "input theta = nan is not a finite number"),
        ({"theta": math.inf, "phi": 1.0}, "input theta = inf is not a finite number"),
        ({"theta": "1.0", "phi": 1.0}, "is not a finite number"),
        ({"theta": True, "phi": 1.0}, "is not a finite number"),
    ],
)  # fmt: skip
def test_binding_errors_name_the_inputs(values: dict[str, object], words: str) -> None:
    with pytest.raises(CircuitError) as err:
        Template(PROGRAM, filename="scan.qasm").bind(values)  # type: ignore[arg-type]
    assert words in str(err.value)
    assert err.value.exit_code == 2


def test_parse_without_binding_names_the_input() -> None:
    with pytest.raises(CircuitError, match="without a value: phi, theta"):
        parse_qasm(PROGRAM)


def test_inputs_are_read_only_and_global() -> None:
    with pytest.raises(CircuitError, match="'theta' is an input"):
        Template(H3 + "input float theta; theta = 1.0;").bind({"theta": 0.0})
    with pytest.raises(CircuitError, match="input inside a block is not supported"):
        Template(H3 + "for int i in [0:1] { input float t; }").bind({})


def test_openqasm_2_is_a_template_without_inputs(tmp_path: object) -> None:
    text = 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[1];\nh q[0];\n'
    template = parse_template(text)
    assert template.inputs == {}
    assert template.bind() == parse_qasm(text)
    with pytest.raises(CircuitError, match="no input named x"):
        template.bind({"x": 1.0})


def test_load_template_hashes_the_bytes(tmp_path: pytest.TempPathFactory) -> None:
    from pathlib import Path

    path = Path(str(tmp_path)) / "scan.qasm"
    path.write_text(PROGRAM)
    template = load_template(path)
    assert template.bind({"theta": 1.0, "phi": 2.0}).source_name == str(path)


# ---- property: random templates and bindings against their literal twins -----------


@dataclass(frozen=True)
class E:
    """A small expression over the inputs, written with names or with literal values."""

    op: str
    args: tuple[E, ...] = ()
    name: str = ""
    value: float = 0.0

    def text(self, literal: dict[str, float] | None) -> str:
        if self.op == "name":
            return f"({literal[self.name]!r})" if literal is not None else self.name
        if self.op == "num":
            return repr(self.value)
        if self.op == "neg":
            return f"-({self.args[0].text(literal)})"
        if self.op in ("sin", "cos"):
            return f"{self.op}({self.args[0].text(literal)})"
        return f"({self.args[0].text(literal)} {self.op} {self.args[1].text(literal)})"


NAMES = ["a", "b", "g"]
leaves = st.one_of(
    st.sampled_from(NAMES).map(lambda n: E("name", name=n)),
    st.floats(-4, 4, allow_nan=False).map(lambda v: E("num", value=v)),
)
exprs = st.recursive(
    leaves,
    lambda inner: st.one_of(
        st.tuples(st.sampled_from(["+", "-", "*"]), inner, inner).map(
            lambda t: E(t[0], (t[1], t[2]))
        ),
        st.tuples(st.sampled_from(["neg", "sin", "cos"]), inner).map(lambda t: E(t[0], (t[1],))),
    ),
    max_leaves=6,
)
GATES = [
    ("rx({}) q[{}];", 1), ("ry({}) q[{}];", 1), ("p({}) q[{}];", 1), ("u3({0}, {0}, 0.5) q[{1}];", 1),
    ("crz({}) q[{}], q[{}];", 2), ("ctrl @ ry({}) q[{}], q[{}];", 2), ("inv @ cp({}) q[{}], q[{}];", 2),
    ("negctrl @ rz({}) q[{}], q[{}];", 2), ("ctrl @ gphase({}) q[{}];", 1),
]  # fmt: skip
lines = st.tuples(st.sampled_from(GATES), exprs, st.permutations([0, 1, 2]))


def render(
    body: list[tuple[tuple[str, int], E, list[int]]], literal: dict[str, float] | None
) -> str:
    head = H3 + ("" if literal else "".join(f"input float[64] {n};\n" for n in NAMES))
    out = [head, "qubit[3] q;\nbit[3] c;\nh q;\n"]
    for (pattern, arity), expr, qubits in body:
        out.append(pattern.format(expr.text(literal), *qubits[:arity]) + "\n")
    out.append("c = measure q;\n")
    return "".join(out)


@settings(max_examples=60, deadline=None, suppress_health_check=list(HealthCheck))
@given(
    st.lists(lines, min_size=1, max_size=6),
    st.fixed_dictionaries({n: st.floats(-10, 10, allow_nan=False) for n in NAMES}),
)
def test_bound_template_is_its_literal_twin(
    body: list[tuple[tuple[str, int], E, list[int]]], values: dict[str, float]
) -> None:
    bound = Template(render(body, None)).bind(values)
    twin = parse_qasm(render(body, values))
    assert canonical_text(bound) == canonical_text(twin)
    backend = StatevectorBackend()
    counts = [backend.execute(Task(c, shots=64, seed=7)).counts for c in (bound, twin)]
    assert counts[0] == counts[1]
