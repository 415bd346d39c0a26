"""Input checks for :mod:`jobkeeper.stats`: counts, probabilities and settings.

Every public comparison runs its arguments through here first, so the numerics can assume
clean arrays and the error a user sees names the argument at fault.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from jobkeeper.exceptions import ConfigError

#: Probabilities at or below this are float noise (see check_probabilities).
NEGLIGIBLE_PROBABILITY = 1e-12
#: Fewest replicates we ever use; below this percentile intervals are meaningless.
MIN_BOOTSTRAP = 100


class StatsInputError(ConfigError, ValueError):
    """Counts or probabilities that cannot be compared (negative, empty, not summing to 1).

    A ``ConfigError`` so the command line exits 2 (bad input); also a ``ValueError`` so
    notebook users can catch it the way they catch any bad argument.
    """


def check_counts(name: str, counts: Mapping[str, int]) -> dict[str, int]:
    """Counts as a plain dict of positive ints; zero entries dropped (they carry no data)."""
    clean: dict[str, int] = {}
    for key, value in counts.items():
        if not isinstance(key, str):
            raise StatsInputError(f"{name}: outcome {key!r} is not a string")
        if isinstance(value, bool) or not _is_integral(value):
            raise StatsInputError(f"{name}: count for {key!r} is not a whole number: {value!r}")
        number = int(value)
        if number < 0:
            raise StatsInputError(f"{name}: count for {key!r} is negative: {number}")
        if number:
            clean[key] = number
    if not clean:
        raise StatsInputError(f"{name}: no shots to compare (all counts are zero or missing)")
    return clean


def _is_integral(value: object) -> bool:
    if isinstance(value, int | np.integer):
        return True
    if isinstance(value, float | np.floating):
        return math.isfinite(value) and float(value).is_integer()
    return False


def check_probabilities(probabilities: Mapping[str, float]) -> dict[str, float]:
    """Probabilities as a dict of positive floats that sum to exactly 1 (renormalised).

    A tolerance of 1e-6 on the sum admits float noise from simulators and rounded tables
    while still catching a distribution with an outcome missing. Probabilities of at most
    NEGLIGIBLE_PROBABILITY count as zero: a simulator's "zero" amplitudes come out as 1e-33
    and the like, and a shot there must read as impossible, not be pooled away.
    """
    clean: dict[str, float] = {}
    total = 0.0
    for key, value in probabilities.items():
        if not isinstance(key, str):
            raise StatsInputError(f"probabilities: outcome {key!r} is not a string")
        try:
            number = float(value)
        except (TypeError, ValueError):
            raise StatsInputError(f"probabilities: {key!r} has probability {value!r}") from None
        if not math.isfinite(number) or number < 0:
            raise StatsInputError(f"probabilities: {key!r} has probability {value!r}")
        total += number
        if number > NEGLIGIBLE_PROBABILITY:
            clean[key] = number
    if abs(total - 1.0) > 1e-6:
        raise StatsInputError(f"probabilities sum to {total!r}, not 1")
    total = math.fsum(clean.values())
    return {key: value / total for key, value in clean.items()}


def check_settings(alpha: float, bootstrap: int, confidence: float, seed: int) -> None:
    """Refuse settings no comparison can use (each error names the setting)."""
    if not 0 < alpha < 1:
        raise StatsInputError(f"alpha must lie strictly between 0 and 1, not {alpha!r}")
    if not 0 < confidence < 1:
        raise StatsInputError(f"confidence must lie strictly between 0 and 1, not {confidence!r}")
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
        raise StatsInputError(f"seed must be a non-negative integer, not {seed!r}")
    if isinstance(bootstrap, bool) or not isinstance(bootstrap, int | np.integer):
        raise StatsInputError(f"bootstrap must be a whole number, not {bootstrap!r}")
    if bootstrap < MIN_BOOTSTRAP:
        raise StatsInputError(
            f"bootstrap must be at least {MIN_BOOTSTRAP} replicates, not {bootstrap!r}"
        )
