"""Sweep definitions (jobkeeper.sweeps): values typed by the program's declarations, axes
with both ends included, grids in nested-loop order, points tables with their text kept,
and the refusals (every one a ConfigError, exit 2, naming what is wrong)."""

from __future__ import annotations

import csv
import io
import itertools
import math
from decimal import Decimal
from fractions import Fraction

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from jobkeeper.exceptions import ConfigError
from jobkeeper.sweeps import (
    MAX_POINTS,
    Bindings,
    bind_settings,
    parse_axis,
    parse_points,
    parse_settings,
    plan_sweep,
)

INPUTS = {"theta": "float", "n": "int", "phi": "angle", "on": "bool", "k": "uint"}


def test_bindings_keep_the_text_and_the_declaration_order() -> None:
    bound = bind_settings(INPUTS, ["k=7", "on=false", "phi=-1.50e-1", "n=-3", "theta=0.50"])
    assert list(bound) == list(INPUTS)
    assert bound.texts() == {"theta": "0.50", "n": "-3", "phi": "-1.50e-1", "on": "false", "k": "7"}
    assert bound.numbers() == {"theta": 0.5, "n": -3, "phi": -0.15, "on": 0, "k": 7}
    assert isinstance(bound.numbers()["n"], int)
    assert bound.describe() == "theta=0.50, n=-3, phi=-1.50e-1, on=false, k=7"
    assert bound == bind_settings(INPUTS, ["theta=0.50", "n=-3", "phi=-1.50e-1", "on=false", "k=7"])


@pytest.mark.parametrize(
    ("items", "words"),
    [
        (["k=-1"], "input k (uint) must not be negative"),
        (["theta=0x10"], "input theta (float) needs a decimal number"),
        (["theta=inf"], "needs a decimal number"),
        (["theta=" + "1" * 101], "too long"),
        (["=1"], "--set takes NAME=VALUE"),
        (["1x=1"], "--set takes NAME=VALUE"),
    ],
)  # fmt: skip
def test_bad_values_are_refused(items: list[str], words: str) -> None:
    with pytest.raises(ConfigError, match=words.replace("(", r"\(").replace(")", r"\)")):
        bind_settings(INPUTS, items)


def test_axis_ends_included_and_exact_decimals_kept() -> None:
    axis = parse_axis(INPUTS, "theta=0:1:11")
    assert [v.text for v in axis.values] == ["0", "0.1", "0.2", "0.3", "0.4", "0.5", "0.6",
                                             "0.7", "0.8", "0.9", "1"]  # fmt: skip
    # 1/3 has no exact decimal: the shortest text that reads back as the nearest float.
    thirds = parse_axis(INPUTS, "phi=0:1:4")
    assert [v.text for v in thirds.values] == ["0", "0.3333333333333333", "0.6666666666666666", "1"]
    assert parse_axis(INPUTS, "n=-4:4:5").values[1].number == -2
    assert [v.number for v in parse_axis(INPUTS, "theta=2.5:2.5:1").values] == [2.5]


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("theta=0:1", "--sweep takes NAME=START:STOP:COUNT"),
        ("theta=0:1:0", "COUNT must be at least 1"),
        ("theta=0:1:-2", "COUNT must be a whole number"),
        ("theta=0:1:1", "COUNT 1 needs START = STOP"),
        ("n=0:1:3", "does not land on whole numbers"),
        ("on=0:1:2", "a bool input cannot be swept"),
        ("gamma=0:1:2", "no input named gamma"),
        (f"theta=0:1:{MAX_POINTS + 1}", f"more than {MAX_POINTS}"),
    ],
)  # fmt: skip
def test_bad_axes_are_refused(text: str, words: str) -> None:
    with pytest.raises(ConfigError, match=words):
        parse_axis(INPUTS, text)


def test_a_grid_runs_in_nested_loop_order() -> None:
    sweep = plan_sweep({"a": "float", "b": "float", "c": "int"},
                       settings=["c=1"], axes=["a=0:1:2", "b=0:1:3"])  # fmt: skip
    assert [(p["a"].text, p["b"].text, p["c"].text) for p in sweep.points] == [
        ("0", "0", "1"), ("0", "0.5", "1"), ("0", "1", "1"),
        ("1", "0", "1"), ("1", "0.5", "1"), ("1", "1", "1"),
    ]  # fmt: skip
    assert sweep.describe() == {
        "fixed": {"c": "1"}, "points": 6,
        "axes": [{"name": "a", "start": "0", "stop": "1", "count": 2},
                 {"name": "b", "start": "0", "stop": "1", "count": 3}],
    }  # fmt: skip


@pytest.mark.parametrize(
    ("kwargs", "words"),
    [
        ({}, "needs at least one axis"),
        ({"axes": ["theta=0:1:2", "theta=0:1:3"]}, "input theta is swept more than once"),
        ({"axes": ["theta=0:1:2"], "settings": ["theta=1"]}, "theta is both fixed"),
        ({"axes": ["theta=0:1:2"]}, "input(s) without a value: n, phi, on, k"),
        ({"axes": ["theta=0:1:1000", "phi=0:1:1000"], "settings": ["n=1", "on=true", "k=1"]},
         "the sweep has 1000000 points, more than 100000"),
    ],
)  # fmt: skip
def test_bad_sweeps_are_refused(kwargs: dict[str, list[str]], words: str) -> None:
    with pytest.raises(ConfigError) as err:
        plan_sweep(INPUTS, **kwargs)  # type: ignore[arg-type]
    assert words in str(err.value)
    assert err.value.exit_code == 2


def test_points_table_keeps_rows_and_text() -> None:
    data = b"\xef\xbb\xbftheta, n\r\n0.10,1\r\n\r\n1e-3,2\r\n"
    table = parse_points(INPUTS, data, name="pts.csv")
    sweep = plan_sweep(INPUTS, settings=["phi=0", "on=true", "k=0"], table=table)
    assert [p.texts() for p in sweep.points] == [
        {"theta": "0.10", "n": "1", "phi": "0", "on": "true", "k": "0"},
        {"theta": "1e-3", "n": "2", "phi": "0", "on": "true", "k": "0"},
    ]
    assert sweep.describe()["points_file"]["digest"].startswith("sha256:")
    with pytest.raises(ConfigError, match="no points"):
        parse_points(INPUTS, b"theta\n", name="p.csv")
    with pytest.raises(ConfigError, match=r"p.csv:1: no input named x"):
        parse_points(INPUTS, b"x\n1\n", name="p.csv")
    with pytest.raises(ConfigError, match=r"p.csv:1: column theta appears more than once"):
        parse_points(INPUTS, b"theta,theta\n1,2\n", name="p.csv")
    with pytest.raises(ConfigError, match=r"p.csv:3: 2 values for 1 columns"):
        parse_points(INPUTS, b"theta\n1\n2,3\n", name="p.csv")
    bad = parse_points({"theta": "float"}, b"theta\n1\nx\n", name="p.csv")
    with pytest.raises(ConfigError, match=r"p.csv:3: input theta \(float\) needs a decimal"):
        plan_sweep({"theta": "float"}, table=bad)
    with pytest.raises(ConfigError, match="not both"):
        plan_sweep(INPUTS, axes=["theta=0:1:2"], table=table)


# ---- properties ------------------------------------------------------------------------

counts = st.integers(1, 6)
ends = st.decimals(-1000, 1000, places=3, allow_nan=False, allow_infinity=False)


@settings(max_examples=150, deadline=None)
@given(st.lists(st.tuples(ends, ends, counts), min_size=1, max_size=3))
def test_grid_is_the_product_of_linear_axes(axes: list[tuple[Decimal, Decimal, int]]) -> None:
    names = [f"x{i}" for i in range(len(axes))]
    inputs = dict.fromkeys(names, "float")
    specs = []
    for name, (start, stop, count) in zip(names, axes, strict=True):
        stop = start if count == 1 else stop
        specs.append((name, start, stop, count))
    sweep = plan_sweep(inputs, axes=[f"{n}={a}:{b}:{c}" for n, a, b, c in specs])
    assert len(sweep) == math.prod(c for *_, c in specs)
    # Nested-loop order: the point at position p has the axis indices of p in mixed radix.
    grids = list(itertools.product(*(range(c) for *_, c in specs)))
    for point, indices in zip(sweep.points, grids, strict=True):
        for (name, start, stop, count), i in zip(specs, indices, strict=True):
            # The value is the nearest float to start + (stop - start)·i/(count - 1), an
            # exact rational (Fraction) computed independently of the module's decimals.
            exact = Fraction(start) + (Fraction(stop) - Fraction(start)) * Fraction(
                i, max(1, count - 1)
            )
            assert point[name].number == float(exact)
            assert float(point[name].text) == point[name].number
    first, last = sweep.points[0], sweep.points[-1]
    for name, start, stop, _ in specs:
        assert first[name].text == str(start) and last[name].text == str(stop)


cell = st.one_of(
    st.integers(-(10**12), 10**12).map(str),
    st.decimals(-1e6, 1e6, places=6, allow_nan=False, allow_infinity=False).map(str),
    st.floats(-1e300, 1e300, allow_nan=False, allow_infinity=False).map(repr),
)


@settings(max_examples=150, deadline=None)
@given(st.lists(st.tuples(cell, cell), min_size=1, max_size=20))
def test_points_file_round_trips_the_exact_text(rows: list[tuple[str, str]]) -> None:
    buffer = io.StringIO()
    writer = csv.writer(buffer)  # Python's own CSV writer: an independent writer
    writer.writerow(["a", "b"])
    writer.writerows(rows)
    inputs = {"a": "float", "b": "angle"}
    table = parse_points(inputs, buffer.getvalue().encode(), name="p.csv")
    sweep = plan_sweep(inputs, table=table)
    assert [tuple(p.texts().values()) for p in sweep.points] == rows
    assert [tuple(p.numbers().values()) for p in sweep.points] == [
        (float(a), float(b)) for a, b in rows
    ]


@given(st.dictionaries(st.from_regex(r"[a-z_][a-z0-9_]{0,8}", fullmatch=True), cell, max_size=6))
def test_settings_round_trip(values: dict[str, str]) -> None:
    items = [f"{name}={text}" for name, text in values.items()]
    assert parse_settings(items) == list(values.items())
    bound = bind_settings(dict.fromkeys(values, "float"), items)
    assert bound.texts() == values
    assert isinstance(bound, Bindings) and list(bound) == list(values)
