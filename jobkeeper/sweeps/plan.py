"""Sweep definitions: which points a sweep has, in which order, before anything runs.

A sweep varies some of a program's inputs and fixes the others:

- an **axis** ``NAME=START:STOP:COUNT`` is COUNT evenly spaced values from START to STOP,
  both ends included (COUNT 1: START alone, and START must equal STOP). Values are
  computed exactly in decimal (40 digits) and read once as numbers: an interior value
  whose decimal is exact keeps that text (``0:1:11`` gives ``0.1``, ``0.2``, …); one
  that is not (``0:1:4``) is written as the shortest decimal that reads back as its
  number (``0.3333333333333333``). The ends keep the text as typed. An axis of an
  ``int`` or ``uint`` input must land on integers.
- several axes make a **grid**, the Cartesian product, in the order of nested loops
  written as the axes are given: the first axis is the outermost loop (its value changes
  slowest), the last axis the innermost (``itertools.product`` order). ``a=0:1:2`` then
  ``b=0:1:3`` gives (a, b) = (0,0) (0,0.5) (0,1) (1,0) (1,0.5) (1,1).
- a **points table** (CSV, header = input names, one row per point) gives the points
  row by row, in the file's order; each cell's text is kept exactly.
- inputs given a fixed value (``--set``) are the same in every point.

Every point binds every input of the program; a name that is no input, an input left
without a value, an input both fixed and varied, a value its type cannot take, an
empty sweep and one of more than :data:`MAX_POINTS` points are refused with a
:class:`~jobkeeper.exceptions.ConfigError` (exit 2) naming what is wrong. A plan is
pure data: nothing here parses a program or runs anything.
"""

from __future__ import annotations

import csv
import io
import itertools
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from decimal import Decimal, Inexact, InvalidOperation, localcontext
from pathlib import Path
from typing import Any

from jobkeeper.exceptions import ConfigError
from jobkeeper.hashing import sha256_tag
from jobkeeper.sweeps.bindings import (
    Bindings,
    Value,
    check_names,
    complete,
    parse_settings,
    parse_value,
    typed,
)

#: Most points one sweep may have. Each point becomes a job (a row, a result, a proof);
#: a hundred thousand is a long afternoon on one machine, and past that a typing slip
#: (an extra digit in a COUNT) is far likelier than intent.
MAX_POINTS = 100_000
#: Digits of the decimal arithmetic that places an axis's values.
AXIS_DIGITS = 40
#: Longest exact decimal kept as an interior value's text (else the shortest repr).
AXIS_TEXT = 30
_AXIS = re.compile(r"\s*([^=\s]+)\s*=\s*([^:]*):([^:]*):([^:]*)\s*")


@dataclass(frozen=True, slots=True)
class Axis:
    """One input varied linearly: ``count`` values from ``start`` to ``stop`` inclusive."""

    name: str
    start: Value
    stop: Value
    count: int
    values: tuple[Value, ...]

    def describe(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "start": self.start.text,
            "stop": self.stop.text,
            "count": self.count,
        }


@dataclass(frozen=True, slots=True)
class PointsTable:
    """A points file as read: its name, the sha256 of its bytes, its header and rows
    (cells as text, each row with its line number)."""

    name: str
    digest: str
    header: tuple[str, ...]
    rows: tuple[tuple[int, tuple[str, ...]], ...]


@dataclass(frozen=True, slots=True)
class Sweep:
    """The points of a sweep, in order, each binding every input of the program."""

    #: inputs that vary (axis order, or the points table's column order)
    varied: tuple[str, ...]
    #: inputs with one value in every point
    fixed: Bindings
    axes: tuple[Axis, ...]
    table: PointsTable | None
    points: tuple[Bindings, ...]

    def __len__(self) -> int:
        return len(self.points)

    def describe(self) -> dict[str, Any]:
        """What defines the sweep, JSON-ready: the axes (or the points file's name and
        digest), the fixed inputs as text, and the number of points."""
        document: dict[str, Any] = {"fixed": self.fixed.texts(), "points": len(self.points)}
        if self.table is not None:
            document["points_file"] = {"name": self.table.name, "digest": self.table.digest}
        else:
            document["axes"] = [axis.describe() for axis in self.axes]
        return document


def parse_axis(inputs: Mapping[str, str], text: str) -> Axis:
    """``NAME=START:STOP:COUNT`` for one of the program's inputs."""
    match = _AXIS.fullmatch(text)
    if match is None:
        raise ConfigError(f"--sweep takes NAME=START:STOP:COUNT, got {text!r}")
    name, start_text, stop_text, count_text = match.groups()
    check_names(inputs, [name], where="--sweep: ")
    type_name = inputs[name]
    if type_name == "bool":
        raise ConfigError(f"--sweep {name}: a bool input cannot be swept linearly (use --points)")
    start = parse_value(name, type_name, start_text)
    stop = parse_value(name, type_name, stop_text)
    count_text = count_text.strip()
    if not count_text.isdigit() or len(count_text) > 9:
        raise ConfigError(f"--sweep {name}: COUNT must be a whole number, got {count_text!r}")
    count = int(count_text)
    if count < 1:
        raise ConfigError(f"--sweep {name}: COUNT must be at least 1 (an empty sweep)")
    if count > MAX_POINTS:
        raise ConfigError(f"--sweep {name}: {count} points, more than {MAX_POINTS} in one sweep")
    if count == 1:
        if start.number != stop.number:
            raise ConfigError(f"--sweep {name}: COUNT 1 needs START = STOP (or give --set)")
        return Axis(name, start, stop, 1, (start,))
    values = [start] + [
        _interior(name, type_name, start.text, stop.text, i, count) for i in range(1, count - 1)
    ]
    return Axis(name, start, stop, count, (*values, stop))


def _interior(name: str, type_name: str, start: str, stop: str, i: int, count: int) -> Value:
    with localcontext() as ctx:
        ctx.prec = AXIS_DIGITS
        ctx.traps[Inexact] = False
        try:
            a, b = Decimal(start), Decimal(stop)
            exact = a + (b - a) * i / (count - 1)
        except InvalidOperation:  # pragma: no cover - both ends were read as numbers
            raise ConfigError(f"--sweep {name}: START and STOP must be numbers") from None
        inexact = bool(ctx.flags[Inexact])
    if type_name in ("int", "uint"):
        if inexact or exact != exact.to_integral_value():
            raise ConfigError(
                f"--sweep {name} ({type_name}): {start}:{stop}:{count} does not land on "
                "whole numbers"
            )
        integer = int(exact)
        return Value(str(integer), integer)
    number = float(exact)
    if not math.isfinite(number):
        raise ConfigError(f"--sweep {name}: a value past the float range")
    text = format(exact, "f")
    if inexact or len(text) > AXIS_TEXT:
        text = repr(number)
    return Value(text, number)


def parse_points(inputs: Mapping[str, str], data: bytes, *, name: str) -> PointsTable:
    """A points table from a CSV file's bytes (UTF-8, an optional byte-order mark):
    a header of input names, then one row of values per point (blank lines skipped)."""
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ConfigError(f"{name}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    try:
        header: tuple[str, ...] | None = None
        rows: list[tuple[int, tuple[str, ...]]] = []
        for cells in reader:
            if not any(cell.strip() for cell in cells):
                continue
            if header is None:
                header = tuple(cell.strip() for cell in cells)
                _check_header(inputs, header, name)
                continue
            if len(cells) != len(header):
                raise ConfigError(
                    f"{name}:{reader.line_num}: {len(cells)} values for {len(header)} columns"
                )
            rows.append((reader.line_num, tuple(cells)))
            if len(rows) > MAX_POINTS:
                raise ConfigError(f"{name}: more than {MAX_POINTS} points in one sweep")
    except csv.Error as exc:
        raise ConfigError(f"{name}:{reader.line_num}: not CSV ({exc})") from None
    if header is None or not rows:
        raise ConfigError(f"{name}: no points (a header of input names, then one row a point)")
    return PointsTable(name, sha256_tag(data), header, tuple(rows))


def _check_header(inputs: Mapping[str, str], header: tuple[str, ...], name: str) -> None:
    for column in header:
        if not column:
            raise ConfigError(f"{name}:1: an empty column name (the header names inputs)")
    doubled = sorted({c for c in header if header.count(c) > 1})
    if doubled:
        raise ConfigError(f"{name}:1: column {', '.join(doubled)} appears more than once")
    check_names(inputs, header, where=f"{name}:1: ")


def read_points(inputs: Mapping[str, str], path: str | Path) -> PointsTable:
    """:func:`parse_points` of a file (ConfigError when it cannot be read)."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise ConfigError(f"cannot read points file {path}: {exc.strerror or exc}") from None
    return parse_points(inputs, data, name=str(path))


def plan_sweep(
    inputs: Mapping[str, str],
    *,
    settings: Sequence[str] = (),
    axes: Sequence[str] = (),
    table: PointsTable | None = None,
    max_points: int = MAX_POINTS,
) -> Sweep:
    """The points of a sweep of a program whose inputs are ``inputs`` (name → declared
    type, in declaration order: :attr:`jobkeeper.circuit.Template.inputs`): ``settings``
    (``NAME=VALUE``) fixed, ``axes`` (``NAME=START:STOP:COUNT``) as a grid, or the rows
    of ``table``; the order is the module docstring's."""
    if axes and table is not None:
        raise ConfigError("a sweep takes axes (--sweep) or a points file (--points), not both")
    if not axes and table is None:
        raise ConfigError("a sweep needs at least one axis (--sweep) or a points file (--points)")
    fixed = typed(inputs, parse_settings(settings), where="--set: ")
    parsed = tuple(parse_axis(inputs, text) for text in axes)
    varied = tuple(axis.name for axis in parsed) if table is None else table.header
    doubled = sorted({name for name in varied if varied.count(name) > 1})
    if doubled:
        raise ConfigError(f"--sweep: input {', '.join(doubled)} is swept more than once")
    both = [name for name in varied if name in fixed]
    if both:
        raise ConfigError(f"input {', '.join(both)} is both fixed (--set) and varied")
    complete(inputs, {**fixed, **{name: Value("0", 0) for name in varied}})
    total = math.prod(axis.count for axis in parsed) if table is None else len(table.rows)
    if total > max_points:
        raise ConfigError(f"the sweep has {total} points, more than {max_points} in one sweep")
    order = list(inputs)
    if table is None:
        rows = itertools.product(*(axis.values for axis in parsed))
        points = tuple(_point(order, fixed, zip(varied, row, strict=True)) for row in rows)
    else:
        points = tuple(
            _point(order, fixed, typed(inputs, zip(varied, cells, strict=True),
                                       where=f"{table.name}:{line}: ").items())
            for line, cells in table.rows
        )  # fmt: skip
    return Sweep(
        varied, Bindings((n, fixed[n]) for n in order if n in fixed), parsed, table, points
    )


def _point(order: list[str], fixed: Mapping[str, Value], varied: Any) -> Bindings:
    values = dict(fixed)
    values.update(varied)
    return Bindings((name, values[name]) for name in order)
