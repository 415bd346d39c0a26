"""Figures of archived records, drawn with matplotlib: a job's histogram and a comparison's
two histograms side by side. The same drawing serves ``jobkeeper plot`` (SVG, PNG or PDF),
the web view and the referee's report (SVG inline).

Made for print: vector output, axis labels that say their units, sizes that stay readable
at a journal's column width (3.5 in, 8 pt text). Each figure's metadata names the record
and the SHA-256 digest of that record's bundle, so a figure in a paper leads back to a
file a referee can verify.

Readers of the figure (tests, tools) find its parts by id in the SVG: ``axes-a`` (and
``axes-b`` beside it in a comparison), bars ``bar-a-0``, ``bar-a-1`` … in the order of the
x tick labels, the x and y axes ``xaxis-a`` and ``yaxis-a``, the note ``note``. Text is
kept as text (not outlines), so tick labels can be read back and searched.

No pyplot: a :class:`~matplotlib.figure.Figure` is made and saved directly, so drawing
neither needs a display nor switches the backend of a user's notebook.
"""

from __future__ import annotations

import io
import textwrap
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal
from xml.etree import ElementTree

import matplotlib
from matplotlib.figure import Figure

Format = Literal["svg", "png", "pdf"]
FORMATS: tuple[Format, ...] = ("svg", "png", "pdf")

#: At most this many outcomes get a bar; the rest are named in the figure's note.
MAX_BARS = 32
#: Below this many shots a frequency is a rough estimate, and the figure says so.
SMALL_SHOTS = 100
COLUMN_WIDTH_IN = 3.5
DOUBLE_WIDTH_IN = 7.0

# One look for every figure, applied only while drawing and saving (rc_context).
STYLE: Any = {  # matplotlib types its keys as literals
    "font.size": 8,
    "axes.titlesize": 8,
    "axes.labelsize": 8,
    "xtick.labelsize": 7,
    "ytick.labelsize": 7,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.linewidth": 0.6,
    "xtick.major.width": 0.6,
    "ytick.major.width": 0.6,
    "text.parse_math": False,  # a "$" in an outcome or a title is text, not mathtext
    "svg.fonttype": "none",  # text stays text: searchable, readable back, smaller
    "svg.hashsalt": "jobkeeper",  # element ids do not change from one run to the next
    "pdf.fonttype": 42,  # TrueType in PDF: editable by journals' tools
    "savefig.dpi": 300,
}
_SVG = "{http://www.w3.org/2000/svg}"
ElementTree.register_namespace("", _SVG[1:-1])
ElementTree.register_namespace("xlink", "http://www.w3.org/1999/xlink")
BAR_COLOURS = ("#3b6ea5", "#c26b2b")


@dataclass(frozen=True)
class Histogram:
    """What one panel shows: ``values`` are counts (``shots`` given) or exact
    probabilities (``shots`` None)."""

    title: str
    values: Mapping[str, float]
    shots: int | None

    def frequencies(self) -> dict[str, float]:
        if self.shots is None:
            return {k: float(v) for k, v in self.values.items()}
        total = float(self.shots) or 1.0
        return {k: float(v) / total for k, v in self.values.items()}


@dataclass(frozen=True)
class FigureSource:
    """Which record a figure draws, and the digest of the bundle that proves it."""

    kind: str  # "job" or "comparison"
    record_id: str
    bundle_digest: str  # "sha256:" + hex
    caption: bool = False

    def lines(self) -> list[str]:
        return [f"{self.kind} {self.record_id}", f"bundle {self.bundle_digest}"]


def chosen_outcomes(panels: Sequence[Mapping[str, float]]) -> tuple[list[str], int]:
    """The outcomes that get a bar, in key order, and how many were left out: all of them
    up to :data:`MAX_BARS`, else the most frequent ones over all panels."""
    every = sorted({key for panel in panels for key in panel})
    if len(every) <= MAX_BARS:
        return every, 0
    weight = {key: max(panel.get(key, 0.0) for panel in panels) for key in every}
    top = sorted(every, key=lambda k: (-weight[k], k))[:MAX_BARS]
    return sorted(top), len(every) - MAX_BARS


def _notes(panels: Sequence[Histogram], shown: Sequence[str], left_out: int) -> list[str]:
    notes = []
    if left_out:
        covered = min(sum(p.frequencies().get(k, 0.0) for k in shown) for p in panels)
        notes.append(
            f"{len(shown)} most frequent outcomes shown; {left_out} more not drawn "
            f"(shown bars hold at least {100 * covered:.1f}% of each panel)"
        )
    small = [p.shots for p in panels if p.shots is not None and p.shots < SMALL_SHOTS]
    if small:
        notes.append(f"{min(small)} shots: frequencies are rough estimates")
    return notes


def _panel(ax: Any, panel: Histogram, shown: Sequence[str], tag: str, colour: str,
           relative: bool) -> None:  # fmt: skip
    values = panel.frequencies() if relative else {k: float(v) for k, v in panel.values.items()}
    positions = range(len(shown))
    bars = ax.bar(positions, [values.get(k, 0.0) for k in shown], width=0.75, color=colour)
    for i, bar in enumerate(bars):
        bar.set_gid(f"bar-{tag}-{i}")
    ax.set_gid(f"axes-{tag}")
    ax.xaxis.set_gid(f"xaxis-{tag}")
    ax.yaxis.set_gid(f"yaxis-{tag}")
    ax.set_xticks(list(positions), list(shown), rotation=90 if len(shown) > 8 else 0)
    ax.set_xlabel("Outcome (bits, c[0] rightmost)" if tag == "a" else "Outcome")
    ax.set_xlim(-0.6, len(shown) - 0.4)
    ax.set_title(panel.title, loc="left")
    if relative:
        ax.set_ylabel("Frequency (fraction of shots)" if panel.shots else "Probability")
    else:
        ax.set_ylabel(f"Counts (shots, of {panel.shots})" if panel.shots else "Probability")
    ax.margins(y=0.08)


def histogram_figure(panel: Histogram, source: FigureSource) -> Figure:
    """One job's counts (or exact probabilities) as bars, one per outcome."""
    shown, left_out = chosen_outcomes([panel.frequencies()])
    peak = max((float(v) for v in panel.values.values()), default=1.0)
    digits = len(f"{peak:.0f}") if panel.shots else 4
    with matplotlib.rc_context(STYLE):
        fig = Figure()
        lines = _lines(source, _notes([panel], shown, left_out), COLUMN_WIDTH_IN)
        _layout(fig, COLUMN_WIDTH_IN, shown, lines, digits, panels=1)
        ax = fig.add_subplot()
        _panel(ax, panel, shown, "a", BAR_COLOURS[0], relative=False)
        _note(fig, lines)
    return fig


def comparison_figure(
    a: Histogram, b: Histogram, source: FigureSource, verdict: str | None = None
) -> Figure:
    """Two jobs' frequencies side by side on one y scale and one outcome order."""
    shown, left_out = chosen_outcomes([a.frequencies(), b.frequencies()])
    width = COLUMN_WIDTH_IN if len(shown) <= 8 else DOUBLE_WIDTH_IN
    notes = _notes([a, b], shown, left_out)
    if verdict:
        notes.insert(0, verdict)
    with matplotlib.rc_context(STYLE):
        fig = Figure()
        lines = _lines(source, notes, width)
        _layout(fig, width, shown, lines, 4, panels=2)
        ax_a, ax_b = fig.subplots(1, 2, sharey=True)
        _panel(ax_a, a, shown, "a", BAR_COLOURS[0], relative=True)
        _panel(ax_b, b, shown, "b", BAR_COLOURS[1], relative=True)
        ax_b.set_ylabel("")
        ax_b.tick_params(labelleft=True)
        _note(fig, lines)
    return fig


# Sizes in inches for a fixed layout: drawing once (no layout engine's extra passes) keeps
# a page's figure quick, and the axes keep their height whatever the notes under them.
_AXES_HEIGHT = 1.75
_TOP = 0.28
_CHAR = 7 * 0.62 / 72  # width of a 7 pt character, roughly
_LINE = 6.5 / 72  # one 5 pt note line


def _lines(source: FigureSource, notes: list[str], width: float) -> list[str]:
    """The note lines under the axes, wrapped to the figure's width (5 pt text)."""
    per_line = int((width - 0.1) * 72 / (5 * 0.56))
    wrapped = [part for note in notes for part in textwrap.wrap(note, per_line)]
    return [*wrapped, *source.lines()] if source.caption else wrapped


def _layout(fig: Figure, width: float, shown: list[str], lines: list[str], digits: int,
            panels: int) -> None:  # fmt: skip
    longest = max((len(k) for k in shown), default=1)
    ticks = longest * _CHAR if len(shown) > 8 else 8 / 72
    bottom = 0.1 + ticks + 0.28 + len(lines) * _LINE
    left = 0.4 + digits * _CHAR
    height = bottom + _AXES_HEIGHT + _TOP
    fig.set_size_inches(width, height)
    fig.subplots_adjust(left=left / width, right=1 - 0.08 / width, bottom=bottom / height,
                        top=1 - _TOP / height, wspace=0.25 if panels > 1 else 0.2)  # fmt: skip


def _note(fig: Figure, lines: list[str]) -> None:
    if lines:
        text = fig.text(0.02 / fig.get_figwidth(), 0.04 / fig.get_figheight(), "\n".join(lines),
                        fontsize=5, ha="left", va="bottom", color="#333333")  # fmt: skip
        text.set_gid("note")


def metadata(source: FigureSource, fmt: Format) -> dict[str, Any]:
    """What each format carries about the record. SVG: Dublin Core (Title, Identifier,
    Source, Description); PDF: the document information dictionary (Title, Subject,
    Keywords); PNG: text chunks of our own names. No dates: the same record draws the same
    bytes."""
    title = f"jobkeeper {source.kind} {source.record_id}"
    about = f"record {source.record_id}; bundle {source.bundle_digest}"
    if fmt == "svg":
        return {"Title": title, "Identifier": f"jobkeeper:{source.kind}:{source.record_id}",
                "Source": source.bundle_digest, "Description": about, "Date": None,
                "Creator": "jobkeeper"}  # fmt: skip
    if fmt == "pdf":
        return {"Title": title, "Subject": about, "Keywords": source.bundle_digest,
                "Creator": "jobkeeper", "CreationDate": None}  # fmt: skip
    return {"Title": title, "Software": "jobkeeper", "jobkeeper-record": source.record_id,
            "jobkeeper-kind": source.kind, "jobkeeper-bundle-sha256": source.bundle_digest}  # fmt: skip


def render(fig: Figure, fmt: Format, source: FigureSource) -> bytes:
    """The figure's bytes in ``fmt``, with the record's metadata."""
    buffer = io.BytesIO()
    with matplotlib.rc_context(STYLE):
        fig.savefig(buffer, format=fmt, metadata=metadata(source, fmt))
    return buffer.getvalue()


def inline_svg(fig: Figure, source: FigureSource, prefix: str = "") -> str:
    """The SVG as an element to place in an HTML page whose Content-Security-Policy allows
    no inline style: matplotlib's ``style`` attributes become SVG presentation attributes
    (which no policy governs), its one ``<style>`` rule is dropped (round line joins, a
    nicety), and the record's id and bundle digest travel as ``data-`` attributes instead
    of an RDF block. Every element id (and reference to one) gets ``prefix``, so that
    several figures on one page keep their ids apart."""
    root = ElementTree.fromstring(render(fig, "svg", source))
    for parent in root.iter():
        for child in list(parent):
            if child.tag in (_SVG + "style", _SVG + "metadata"):
                parent.remove(child)
    for element in root.iter():
        style = element.attrib.pop("style", None)
        if style:
            for item in style.split(";"):
                name, _, value = item.partition(":")
                if name.strip() and value.strip():
                    element.set(name.strip(), value.strip())
    if prefix:
        _prefix_ids(root, prefix)
    root.set("data-record", source.record_id)
    root.set("data-bundle-sha256", source.bundle_digest)
    root.set("role", "img")
    return ElementTree.tostring(root, encoding="unicode")


_XLINK_HREF = "{http://www.w3.org/1999/xlink}href"


def _prefix_ids(root: ElementTree.Element, prefix: str) -> None:
    for element in root.iter():
        if "id" in element.attrib:
            element.set("id", prefix + element.attrib["id"])
        href = element.get(_XLINK_HREF)
        if href and href.startswith("#"):
            element.set(_XLINK_HREF, "#" + prefix + href[1:])
        clip = element.get("clip-path")
        if clip and clip.startswith("url(#"):
            element.set("clip-path", "url(#" + prefix + clip[5:])


__all__ = [
    "FORMATS",
    "MAX_BARS",
    "FigureSource",
    "Format",
    "Histogram",
    "chosen_outcomes",
    "comparison_figure",
    "histogram_figure",
    "inline_svg",
    "metadata",
    "render",
]
