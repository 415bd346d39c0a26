"""Binding fast (:mod:`jobkeeper.circuit.qasm3.compiled`): a traced template binds each
point to exactly the circuit the interpreter gives (equal operations, equal canonical
text), and any program or point the trace cannot decide is bound by the interpreter,
errors included."""

from __future__ import annotations

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from jobkeeper.circuit import Template, canonical_text
from jobkeeper.exceptions import CircuitError

H3 = 'OPENQASM 3.0;\ninclude "stdgates.inc";\n'


def _same(template: Template, values: dict[str, float]) -> None:
    fast, text = template.bind_canonical(values)
    slow = template._interpret(values)
    assert fast == slow
    assert text == canonical_text(slow)


# -- random templates ---------------------------------------------------------------------

_NAMES = ("theta", "phi")
_LEAVES = st.sampled_from(["theta", "phi", "pi", "2", "0.5", "-1.25", "τ", "3"])


def _expression(depth: int = 2) -> st.SearchStrategy[str]:
    if depth == 0:
        return _LEAVES
    inner = _expression(depth - 1)
    return st.one_of(
        _LEAVES,
        st.tuples(inner, st.sampled_from(["+", "-", "*", "/"]), inner).map(
            lambda t: f"({t[0]} {t[1]} {t[2]})"
        ),
        st.tuples(st.sampled_from(["sin", "cos", "exp", "sqrt"]), inner).map(
            lambda t: f"{t[0]}({t[1]})"
        ),
        inner.map(lambda e: f"-{e}"),
        inner.map(lambda e: f"float({e})"),
    )


_ONE_PARAM = ["rx", "ry", "rz", "p", "phase", "u1"]
_TWO_QUBIT_PARAM = ["crx", "cry", "crz", "cp", "cphase"]


#: statement forms: {g1}/{g2} a one-/two-qubit gate taking one angle, {e}/{f} angle
#: expressions, {a}/{b} two distinct qubits.
_FORMS = (
    "{g1}({e}) q[{a}];",
    "{g2}({e}) q[{a}], q[{b}];",
    "U({e}, {f}, 0.25) q[{a}];",
    "inv @ u3({e}, 0.5, {f}) q[{a}];",
    "ctrl @ rz({e}) q[{a}], q[{b}];",
    "g({e}) q[{a}], q[{b}];",
    "for int i in [0:1] {{ rx({e} * i) q[{a}]; }}",
)


@st.composite
def _statement(draw: st.DrawFn) -> str:
    a, b = draw(st.lists(st.integers(0, 2), min_size=2, max_size=2, unique=True))
    return draw(st.sampled_from(_FORMS)).format(
        g1=draw(st.sampled_from(_ONE_PARAM)), g2=draw(st.sampled_from(_TWO_QUBIT_PARAM)),
        e=draw(_expression()), f=draw(_expression(1)), a=a, b=b,
    )  # fmt: skip


_GATE = "gate g(t) x, y { ry(t / 2) x; cx x, y; rz(-t) y; }\n"


def _program(body: list[str]) -> str:
    return (
        H3
        + "input float[64] theta;\ninput angle phi;\nqubit[3] q;\nbit[3] c;\n"
        + _GATE
        + "\n".join(body)
        + "\nc = measure q;\n"
    )


_VALUES = st.floats(-4.0, 4.0, allow_nan=False, allow_infinity=False)


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(body=st.lists(_statement(), min_size=1, max_size=6), points=st.lists(
    st.tuples(_VALUES, _VALUES), min_size=1, max_size=4))  # fmt: skip
def test_fast_binding_is_the_interpreters(
    body: list[str], points: list[tuple[float, float]]
) -> None:
    template = Template(_program(body))
    for theta, phi in points:
        values = {"theta": theta, "phi": phi}
        try:
            slow = template._interpret(values)
        except CircuitError as exc:
            # e.g. sqrt of a negative, a division by zero: the same refusal.
            with pytest.raises(CircuitError) as caught:
                template.bind(values)
            assert str(caught.value) == str(exc)
            continue
        fast, text = template.bind_canonical(values)
        assert fast == slow
        assert text == canonical_text(slow)


def test_a_simple_template_traces() -> None:
    template = Template(_program(["rx(theta * 2) q[0];", "g(phi) q[1], q[2];", "h q[0];"]))
    _same(template, {"theta": 0.3, "phi": -1.1})
    point = template.bind_many([{"theta": 0.3, "phi": 1.0}])[0]
    assert point.shape == 0


@pytest.mark.parametrize(
    "line",
    [
        "if (theta > 0) x q[0];",  # a comparison needs the value
        "pow(theta) @ x q[0];",  # a real power needs the matrix
        "ctrl(2) @ rx(theta) q[0], q[1], q[2];",  # a matrix root needs the value
        "rx(floor(theta)) q[0];",  # an integer function needs the value
        "int k = int(theta * 10); rx(k) q[0];",  # an integer cast needs the value
    ],
)
def test_programs_that_need_values_bind_by_the_interpreter(line: str) -> None:
    template = Template(_program([line, "rx(phi) q[1];"]))
    for theta in (-0.7, 0.0, 0.45, 2.5):
        _same(template, {"theta": theta, "phi": 0.2})
    assert all(shape is None for shape in template._compiled.shapes.values())


def test_integer_inputs_select_a_shape_each() -> None:
    text = (
        H3 + "input int n;\ninput float a;\nqubit[4] q;\n"
        "for int i in [0:n - 1] { rx(a * i) q[i]; }\n"
    )
    template = Template(text)
    for n in (1, 3, 4, 3):
        _same(template, {"n": n, "a": 0.125 * n})
    assert len(template._compiled.shapes) == 3


def test_a_point_the_trace_cannot_decide_gets_the_interpreters_error() -> None:
    template = Template(H3 + "input float a;\nqubit q;\nrx(1 / a) q;\n")
    _same(template, {"a": 2.0})
    with pytest.raises(CircuitError, match="division by zero"):
        template.bind({"a": 0.0})
    overflow = Template(H3 + "input float a;\nqubit q;\nrx(exp(a) - exp(a)) q;\n")
    _same(overflow, {"a": 1.0})
    with pytest.raises(CircuitError, match=r"finite"):
        overflow.bind({"a": 1000.0})


def test_the_interpreter_and_the_trace_refuse_alike() -> None:
    template = Template(H3 + "input float a;\nint k = a;\nqubit q;\nrx(k) q;\n")
    with pytest.raises(CircuitError, match="use a cast"):
        template.bind({"a": 1.5})


def test_a_template_pickles_and_traces_again() -> None:
    # A worker may hand a batch to another process: the template goes with it.
    import pickle

    template = Template(_program(["rx(theta) q[0];"]))
    values = {"theta": 0.5, "phi": 0.25}
    before = template.bind(values)
    copy = pickle.loads(pickle.dumps(template))
    assert copy.bind(values) == before


def test_deep_expressions_trace_in_linear_time() -> None:
    # Each level is evaluated once (re-evaluating an operand per level would take 2^40).
    negated = "-" * 40 + "theta"
    nested = "sin(" * 40 + "theta" + ")" * 40
    template = Template(_program([f"rx({negated}) q[0];", f"ry({nested}) q[1];"]))
    _same(template, {"theta": 0.3, "phi": 0.0})
    assert template.bind_many([{"theta": 0.3, "phi": 0.0}])[0].shape == 0
