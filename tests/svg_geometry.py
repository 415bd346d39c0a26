"""Reading a figure's drawn geometry back from its SVG, with the standard library's XML
parser: bar rectangles, tick marks with their labels, and the linear map from drawing
units to data that the ticks define. Nothing here reads the figure's metadata: what the
reader sees is what was drawn."""

from __future__ import annotations

import re
from dataclasses import dataclass
from xml.etree import ElementTree

SVG = "{http://www.w3.org/2000/svg}"
XLINK_HREF = "{http://www.w3.org/1999/xlink}href"
NUMBER = re.compile(r"-?\d+(?:\.\d+)?(?:e-?\d+)?")


@dataclass(frozen=True)
class Bar:
    left: float
    right: float
    top: float  # drawing units: y grows downwards
    bottom: float

    @property
    def centre(self) -> float:
        return (self.left + self.right) / 2


@dataclass(frozen=True)
class Tick:
    position: float  # x for an x tick, y for a y tick (drawing units)
    label: str


def parse(svg: str | bytes) -> ElementTree.Element:
    return ElementTree.fromstring(svg)


def by_id(root: ElementTree.Element, ident: str) -> ElementTree.Element:
    for element in root.iter():
        if element.get("id") == ident:
            return element
    raise KeyError(ident)


def bars(root: ElementTree.Element, tag: str = "a", prefix: str = "") -> list[Bar]:
    """The bars of panel ``tag``, in order (ids ``bar-TAG-0``, ``bar-TAG-1`` …)."""
    out = []
    for i in range(10_000):
        try:
            group = by_id(root, f"{prefix}bar-{tag}-{i}")
        except KeyError:
            break
        path = group.find(f"{SVG}path")
        assert path is not None
        values = [float(v) for v in NUMBER.findall(path.get("d", ""))]
        xs, ys = values[0::2], values[1::2]
        out.append(Bar(min(xs), max(xs), min(ys), max(ys)))
    return out


def ticks(root: ElementTree.Element, axis: str, prefix: str = "") -> list[Tick]:
    """The major ticks of an axis group (``xaxis-a``, ``yaxis-a``): the tick mark's
    position and the text drawn beside it."""
    group = by_id(root, prefix + axis)
    coordinate = "x" if axis.startswith("x") else "y"
    out = []
    for tick in group:
        ident = tick.get("id", "")
        if not re.search(r"[xy]tick_\d+$", ident):
            continue
        mark = next(tick.iter(f"{SVG}use"))
        text = "".join(next(tick.iter(f"{SVG}text")).itertext())
        out.append(Tick(float(mark.get(coordinate, "nan")), text))
    return out


def tick_value(label: str) -> float:
    # matplotlib writes a minus sign as U+2212
    return float(label.replace("\u2212", "-"))


def y_to_data(y_ticks: list[Tick]) -> tuple[float, float]:
    """(scale, offset) with data = scale * y + offset, fitted through the first and last
    labelled ticks (a linear axis), checked against every tick in between."""
    first, last = y_ticks[0], y_ticks[-1]
    scale = (tick_value(last.label) - tick_value(first.label)) / (last.position - first.position)
    offset = tick_value(first.label) - scale * first.position
    for tick in y_ticks:
        assert abs(scale * tick.position + offset - tick_value(tick.label)) < 1e-6 * max(
            1.0, abs(tick_value(tick.label))
        )
    return scale, offset


def bar_values(root: ElementTree.Element, tag: str = "a", prefix: str = "") -> dict[str, float]:
    """Outcome label (the x tick under the bar's centre) → the bar's height in data units."""
    scale, offset = y_to_data(ticks(root, f"yaxis-{tag}", prefix))
    labels = {round(t.position, 3): t.label for t in ticks(root, f"xaxis-{tag}", prefix)}
    out = {}
    for bar in bars(root, tag, prefix):
        label = labels[round(bar.centre, 3)]
        out[label] = (scale * bar.top + offset) - (scale * bar.bottom + offset)
    return out
