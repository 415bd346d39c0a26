"""The wording of :mod:`jobkeeper.stats`: notes and number formats for a Comparison.

Apart from the numerics so the sentences a user reads can be changed without touching the
statistics (and reviewed in one place).
"""

from __future__ import annotations

from collections.abc import Mapping

from jobkeeper.stats.chisquare import TestResult, minimum_detectable_tvd

#: Below this many shots on a side, only large differences can be detected.
FEW_SHOTS = 100
#: Power quoted in the "smallest detectable difference" note.
QUOTED_POWER = 0.9


def common_notes(
    test: TestResult, alpha: float, fewest: int, shots_a: int, shots_b: int | None
) -> list[str]:
    notes: list[str] = []
    if test.p_value is None:
        notes.append(
            "Too few shots to tell: after pooling rare outcomes so every expected count is at "
            f"least 5, fewer than two cells remain ({test.pooled_outcomes} outcome(s) pooled)."
        )
    elif test.pooled_outcomes:
        notes.append(
            f"{test.pooled_outcomes} rare outcome(s) ({test.pooled_share:.1%} of the "
            f"{'shots' if shots_b is not None else 'probability'}) were pooled into one cell "
            "so every expected count is at least 5."
        )
    if fewest < FEW_SHOTS:
        notes.append(
            f"With so few shots ({fewest} on the smaller side) only large differences can be "
            "detected."
        )
    if (
        test.p_value is not None
        and test.g_p_value is not None
        and (test.p_value < alpha) != (test.g_p_value < alpha)
    ):
        notes.append(
            f"The G-test disagrees (p {p_text(test.g_p_value)}); the verdict follows the "
            "chi-square test. Results this close to α deserve more shots."
        )
    if test.p_value is not None and test.p_value >= alpha and test.cells >= 2:
        smallest = minimum_detectable_tvd(shots_a, shots_b, test.cells, alpha, QUOTED_POWER)
        notes.append(
            f"At these shot counts the test detects a total variation distance of "
            f"{smallest:.3f} or more between the (pooled) distributions with "
            f"{QUOTED_POWER:.0%} power, however the difference is spread."
        )
    return notes


def label_width_note(a: Mapping[str, int], b: Mapping[str, int]) -> list[str]:
    widths_a, widths_b = {len(key) for key in a}, {len(key) for key in b}
    if len(widths_a) == 1 and len(widths_b) == 1 and widths_a != widths_b:
        return [
            f"The outcome labels have different widths ({widths_a.pop()} and "
            f"{widths_b.pop()} characters): are these runs of the same circuit?"
        ]
    return []


def noise_note(tvd: float, noise: float, *, one_sample: bool = False) -> list[str]:
    if tvd > 0 and noise >= 0.5 * tvd:
        between = (
            "between a sample and the distribution it was drawn from"
            if one_sample
            else "between two samples of one distribution"
        )
        return [
            f"Much of the observed distance is sampling noise (about {noise:.3f} would appear "
            f"{between}): the true distance is likely smaller than observed."
        ]
    return []


def reduced_bootstrap_note(reps: int, cells: int) -> str:
    return (
        f"The bootstrap used {reps} replicates (not the number asked) to bound run time over "
        f"{cells} outcomes; the interval's ends are rougher for it."
    )


def table_words(test: TestResult, *, two_sample: bool) -> str:
    if test.p_value is None:
        return "not run: too few shots after pooling"
    shape = f"2×{test.cells} table" if two_sample else f"{test.cells} cells"
    pooled = f", {test.pooled_outcomes} rare outcome(s) pooled" if test.pooled_outcomes else ""
    return f"on {shape}{pooled}"


def p_text(value: float | None) -> str:
    """A p-value with its relation sign: "= 0.42", "= 3.2e-05", "< 1e-300"."""
    if value is None:
        return "n/a"
    if value == 0:
        return "< 1e-300"  # underflow: scipy returns 0 below the smallest double
    if value < 1e-3:
        return f"= {value:.1e}"
    return f"= {value:.2g}"


def percent(level: float) -> str:
    text = f"{level * 100:.1f}".rstrip("0").rstrip(".")
    return f"{text}%"
