"""Plain-text and JSON rendering for the command line (no logic, no I/O beyond strings)."""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

from jobkeeper.shapes import job_json, when, when_iso

if TYPE_CHECKING:  # numpy stays unloaded for --help
    from jobkeeper.counts import RegisterLayout

__all__ = [
    "bar_chart",
    "counts_csv",
    "job_json",
    "key_legend",
    "shots_warning",
    "table",
    "when",
    "when_iso",
]

BAR_WIDTH = 40
SMALL_SHOTS = 100


def bar_chart(values: Mapping[str, float], *, total: float | None = None, limit: int = 32) -> str:
    """A horizontal bar chart of counts or probabilities, largest first."""
    if not values:
        return "(no outcomes)"
    total = total if total is not None else float(sum(values.values())) or 1.0
    items = sorted(values.items(), key=lambda kv: (-kv[1], kv[0]))
    shown = items[:limit]
    width = max(len(key) for key, _ in shown)
    peak = max(value for _, value in shown) or 1.0
    lines = []
    for key, value in shown:
        bar = "█" * max(1, round(BAR_WIDTH * value / peak)) if value > 0 else ""
        number = f"{value:>8d}" if isinstance(value, int) else f"{value:8.6f}"
        lines.append(f"  {key:<{width}}  {number}  {100.0 * value / total:6.2f}%  {bar}")
    if len(items) > limit:
        rest = sum(value for _, value in items[limit:])
        lines.append(f"  … {len(items) - limit} more outcomes ({100.0 * rest / total:.2f}%)")
    return "\n".join(lines)


def shots_warning(shots: int) -> str | None:
    if shots < SMALL_SHOTS:
        return (
            f"note: {shots} shots is a small sample; frequencies can be far from the "
            "probabilities (the standard error of a frequency near 0.5 is "
            f"about {0.5 / shots**0.5:.2f})"
        )
    return None


def table(rows: list[list[str]], headers: list[str]) -> str:
    widths = [len(h) for h in headers]
    for row in rows:
        widths = [max(w, len(cell)) for w, cell in zip(widths, row, strict=True)]
    lines = ["  ".join(h.ljust(w) for h, w in zip(headers, widths, strict=True)).rstrip()]
    for row in rows:
        lines.append("  ".join(c.ljust(w) for c, w in zip(row, widths, strict=True)).rstrip())
    return "\n".join(lines)


def counts_csv(values: dict[str, Any], layout: RegisterLayout, column: str) -> str:
    """CSV of outcomes: the key, then one column per register (``reg_<name>``, its
    value in binary), then the count or probability."""
    import csv  # only this format needs it
    import io

    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(["outcome", *layout.columns(), column])
    for key in sorted(values):
        writer.writerow([key, *layout.split(key), values[key]])
    return buffer.getvalue()


def key_legend(count_keys: Mapping[str, Any]) -> str:
    """One line naming the registers of a key with several, as they stand in it
    (``a[2]|b[1]``), from a layout as ``RegisterLayout.describe`` gives it;
    nothing for one register, whose key is its value."""
    registers = count_keys.get("registers") or []
    if len(registers) < 2:
        return ""
    parts = [f"{r['name']}[{r['width']}]" for r in registers]
    if count_keys.get("first_declared") == "rightmost":
        parts.reverse()
    return str(count_keys.get("separator")).join(parts)
