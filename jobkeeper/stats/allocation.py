"""Splitting a shot budget over measurement settings.

Each setting gets at least ``floor`` shots; the rest of the budget is shared in
proportion to the setting's weight, the sum of |coefficients| of its terms. The
proportional rule follows Rubin, Babbush, McClean, "Application of fermionic marginal
constraints to hybrid quantum algorithms", New J. Phys. 20, 053020 (2018) (from memory:
with every term's single-shot variance bounded by 1, the shares that minimise the
worst-case variance of the sum are proportional to |coefficient|); summing the
coefficients of the terms one setting measures together is common practice.

The floor (default 30, the usual rule of thumb for a normal approximation of a mean;
common practice) keeps every setting's sample variance meaningful: a setting with a
handful of shots that all agree would report a standard error of 0.

Rounding is by largest remainder in exact rational arithmetic (the weights as the exact
rationals their doubles are), ties to the lower setting index, so the split is the same
on every machine and always sums to the budget.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from fractions import Fraction

from jobkeeper.stats.inputs import StatsInputError

#: Fewest shots any setting gets (see the module docstring).
DEFAULT_FLOOR = 30
#: The rule's name in an estimate's method (a new rule gets a new name).
RULE = "floor-then-proportional-to-coefficient-sum-largest-remainder"


def allocate_shots(weights: Sequence[float], budget: int, floor: int = DEFAULT_FLOOR) -> list[int]:
    """Shots per setting: each at least ``floor``, the rest in proportion to ``weights``,
    summing to ``budget``. Raises StatsInputError if the budget cannot give every
    setting its floor, or on a negative or non-finite weight."""
    if isinstance(budget, bool) or not isinstance(budget, int) or budget < 1:
        raise StatsInputError(f"the shot budget must be a positive whole number, got {budget!r}")
    if isinstance(floor, bool) or not isinstance(floor, int) or floor < 2:
        raise StatsInputError(
            f"the floor must be at least 2 shots per setting (a sample variance needs two), got {floor!r}"
        )
    for w in weights:
        if not math.isfinite(w) or w < 0:
            raise StatsInputError(f"a setting's weight must be finite and not negative, got {w!r}")
    count = len(weights)
    if count == 0:
        return []
    if budget < floor * count:
        raise StatsInputError(
            f"{budget} shots cannot give each of the {count} settings its floor of {floor} "
            f"shots: ask for at least {floor * count}"
        )
    rest = budget - floor * count
    exact = [Fraction(w) for w in weights]
    total = sum(exact, Fraction(0))
    if total == 0:
        exact, total = [Fraction(1)] * count, Fraction(count)
    quotas = [rest * w / total for w in exact]
    shares = [math.floor(q) for q in quotas]
    left = rest - sum(shares)
    by_remainder = sorted(range(count), key=lambda i: (-(quotas[i] - shares[i]), i))
    for i in by_remainder[:left]:
        shares[i] += 1
    return [floor + s for s in shares]
