"""Comparing count distributions: is a rerun the same, or a device like the ideal?

The public names live here; the modules hold one concern each:

- ``comparison`` — :class:`Comparison` and the two entry points (the method notes);
- ``chisquare`` — pooling, the chi-square and G tests, and the test's power;
- ``bootstrap`` — multinomial resampling and the interval for the total variation distance;
- ``inputs`` — checks of counts, probabilities and settings;
- ``wording`` — the sentences a reader sees (notes and number formats).
"""

from jobkeeper.stats.chisquare import minimum_detectable_tvd
from jobkeeper.stats.comparison import (
    Comparison,
    Verdict,
    compare_counts,
    compare_to_distribution,
)
from jobkeeper.stats.inputs import StatsInputError

__all__ = [
    "Comparison",
    "StatsInputError",
    "Verdict",
    "compare_counts",
    "compare_to_distribution",
    "minimum_detectable_tvd",
]
