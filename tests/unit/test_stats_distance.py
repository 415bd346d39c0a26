"""The total variation distance's estimate and interval (jobkeeper.stats.distance).

Coherence: the reported estimate lies inside its own interval, always. Calibration: over
seeded simulations with a known pair of distributions, the 95 % interval covers the true
TVD at 95 % within a stated binomial tolerance; where the method is known to be
conservative or to under-cover, the measured rate is pinned with a floor so a regression
shows. Seeds are fixed: each check passes on every run or fails on every run.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from jobkeeper.stats import compare_counts, compare_to_distribution


def as_counts(vector: np.ndarray) -> dict[str, int]:
    return {format(i, "03d"): int(value) for i, value in enumerate(vector)}


def as_probabilities(vector: np.ndarray) -> dict[str, float]:
    return {format(i, "03d"): float(value) for i, value in enumerate(vector)}


def alternating_pair(tvd: float, k: int = 8) -> tuple[np.ndarray, np.ndarray]:
    """Two k-outcome distributions at TVD exactly ``tvd``, every outcome differing."""
    delta = np.where(np.arange(k) % 2 == 0, 1.0, -1.0) * tvd * 2 / k
    p, q = np.full(k, 1 / k) + delta / 2, np.full(k, 1 / k) - delta / 2
    assert 0.5 * np.abs(p - q).sum() == pytest.approx(tvd)  # definition ½Σ|p − q|
    return p, q


@pytest.mark.parametrize("one_sample", [False, True])
def test_estimate_always_inside_its_interval(one_sample: bool) -> None:
    # Random pairs of every kind: equal and unequal distributions, 2 to 64 outcomes, 5 to
    # 5000 shots, random confidence levels (the property holds at every level).
    rng = np.random.default_rng(20261205)
    for trial in range(300):
        k = int(rng.integers(2, 65))
        p = rng.dirichlet(np.full(k, float(rng.choice([0.3, 1.0, 5.0]))))
        q = p if trial % 3 == 0 else rng.dirichlet(np.ones(k))
        x = rng.multinomial(int(rng.integers(5, 5000)), p)
        confidence = float(rng.choice([0.5, 0.8, 0.95, 0.99, 0.999]))
        if one_sample:
            result = compare_to_distribution(
                as_counts(x), as_probabilities(q), bootstrap=100, seed=trial, confidence=confidence
            )
        else:
            y = rng.multinomial(int(rng.integers(5, 5000)), q)
            if x.sum() == 0 or y.sum() == 0:
                continue
            result = compare_counts(
                as_counts(x), as_counts(y), bootstrap=100, seed=trial, confidence=confidence
            )
        low, high = result.tvd_ci
        assert 0.0 <= low <= result.tvd_estimate <= high <= 1.0, (trial, result.summary())


def coverage(one_sample: bool, p: np.ndarray, q: np.ndarray, shots: int, trials: int) -> float:
    true = 0.5 * float(np.abs(p - q).sum())
    rng = np.random.default_rng(31 + one_sample)
    covered = 0
    for seed in range(trials):
        x = as_counts(rng.multinomial(shots, p))
        if one_sample:
            result = compare_to_distribution(x, as_probabilities(q), bootstrap=1000, seed=seed)
        else:
            y = as_counts(rng.multinomial(shots, q))
            result = compare_counts(x, y, bootstrap=1000, seed=seed)
        low, high = result.tvd_ci
        covered += low <= true <= high
    return covered / trials


@pytest.mark.parametrize("one_sample", [False, True])
def test_interval_is_calibrated_where_every_outcome_differs(one_sample: bool) -> None:
    # Known pair: 8 outcomes at TVD 0.3, every outcome differing by ±0.075, 1000 shots.
    # The rate must be 95 % within 3σ of Binomial(400, 0.95): σ = √(0.95·0.05/400) ≈ 0.0109,
    # band 0.917-0.983 (normal approximation to the binomial, textbook). Measured: 0.948
    # (two samples), 0.963 (one sample).
    trials = 400
    band = 3 * math.sqrt(0.95 * 0.05 / trials)
    rate = coverage(one_sample, *alternating_pair(0.3), shots=1000, trials=trials)
    assert abs(rate - 0.95) <= band, f"coverage {rate:.3f}"


@pytest.mark.parametrize(
    ("one_sample", "floor"),
    # Measured (200 trials): 0.94 / 0.955 with no difference, where zero stays inside by the
    # test; conservative regimes are not pinned from above.
    [(False, 0.9), (True, 0.9)],
)
def test_interval_covers_zero_when_there_is_no_difference(one_sample: bool, floor: float) -> None:
    p = np.full(8, 1 / 8)
    assert coverage(one_sample, p, p, shots=1000, trials=200) >= floor


def test_known_under_coverage_is_pinned() -> None:
    # Two outcomes with few shots each differ, 62 agree (k = 64, 2000 shots, TVD 0.02): the
    # delta approximation for the two sparse outcomes is rough and the interval under-covers.
    # Measured 0.868 (400 trials); documented in jobkeeper.stats.distance. A floor of 0.8
    # makes a regression show.
    delta = np.zeros(64)
    delta[0], delta[1] = 0.02, -0.02
    p, q = np.full(64, 1 / 64) + delta / 2, np.full(64, 1 / 64) - delta / 2
    assert coverage(False, p, q, shots=2000, trials=100) >= 0.8


def test_summary_says_which_distance_is_which() -> None:
    result = compare_counts({"0": 520, "1": 480}, {"0": 480, "1": 520})
    text = result.summary()
    assert "sampling bias removed" in text and "Observed between the frequencies" in text
    assert f"{result.tvd_estimate:.3f}" in text and f"{result.tvd:.3f}" in text
    assert result.to_json()["tvd_estimate"] == result.tvd_estimate
