"""Property tests for jobkeeper.stats (hypothesis): symmetry and ranges.

The properties are mathematical facts of the definitions (common practice): TVD, the
Bhattacharyya coefficient and the Hellinger distance are symmetric and lie in [0, 1]; equal
distributions have TVD 0, coefficient 1 and distance 0; Pearson's test of homogeneity does not depend on the order of the rows.
"""

from __future__ import annotations

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from jobkeeper.stats import compare_counts, compare_to_distribution

OUTCOMES = ["00", "01", "10", "11", "0", "1"]
counts_tables = st.dictionaries(
    st.sampled_from(OUTCOMES), st.integers(min_value=0, max_value=300), min_size=1
).filter(lambda table: sum(table.values()) > 0)

FAST = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@FAST
@given(counts_tables, counts_tables)
def test_symmetric_in_a_and_b(a: dict[str, int], b: dict[str, int]) -> None:
    forward = compare_counts(a, b, bootstrap=100)
    backward = compare_counts(b, a, bootstrap=100)
    assert forward.tvd == backward.tvd
    assert forward.bhattacharyya_coefficient == pytest.approx(backward.bhattacharyya_coefficient)
    assert forward.hellinger_distance == pytest.approx(backward.hellinger_distance)
    assert forward.verdict == backward.verdict
    if forward.p_value is None:
        assert backward.p_value is None
    else:
        assert forward.p_value == pytest.approx(backward.p_value, rel=1e-9, abs=1e-300)
    assert forward.tvd_ci == backward.tvd_ci


@FAST
@given(counts_tables, counts_tables)
def test_ranges(a: dict[str, int], b: dict[str, int]) -> None:
    result = compare_counts(a, b, bootstrap=100)
    assert 0.0 <= result.tvd <= 1.0
    assert 0.0 <= result.bhattacharyya_coefficient <= 1.0
    assert 0.0 <= result.hellinger_distance <= 1.0
    assert result.hellinger_distance**2 == pytest.approx(1 - result.bhattacharyya_coefficient)
    low, high = result.tvd_ci
    assert 0.0 <= low <= high <= 1.0
    assert result.p_value is None or 0.0 <= result.p_value <= 1.0
    assert result.g_p_value is None or 0.0 <= result.g_p_value <= 1.0
    # The coefficient and TVD bound each other: 1 − BC ≤ TVD ≤ √(1 − BC²) (Fuchs–van de
    # Graaf, for classical distributions; published).
    bc = result.bhattacharyya_coefficient
    assert 1 - bc <= result.tvd + 1e-12
    assert result.tvd <= (1 - bc**2) ** 0.5 + 1e-12


@FAST
@given(counts_tables, st.integers(min_value=2, max_value=5))
def test_same_distribution_has_tvd_zero_and_full_overlap(a: dict[str, int], scale: int) -> None:
    # Scaling every count keeps the distribution: not identical tables, same frequencies.
    b = {key: value * scale for key, value in a.items()}
    result = compare_counts(a, b, bootstrap=100)
    assert result.tvd == pytest.approx(0.0, abs=1e-15)
    assert result.bhattacharyya_coefficient == pytest.approx(1.0, rel=1e-12)
    assert result.hellinger_distance == pytest.approx(0.0, abs=1e-6)
    assert result.verdict == "consistent"
    assert compare_counts(a, dict(a), bootstrap=100).verdict == "identical"


@FAST
@given(counts_tables)
def test_one_sample_ranges_and_self_agreement(a: dict[str, int]) -> None:
    total = sum(a.values())
    probs = {key: value / total for key, value in a.items() if value}
    result = compare_to_distribution(a, probs, bootstrap=100)
    assert result.tvd == pytest.approx(0.0, abs=1e-12)
    assert result.bhattacharyya_coefficient == pytest.approx(1.0, rel=1e-12)
    assert result.verdict in ("identical", "consistent")
    low, high = result.tvd_ci
    assert 0.0 <= low <= high <= 1.0
