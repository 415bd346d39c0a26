"""Acceptance tests for jobkeeper.stats: reference values, calibration, power, pooling, CI.

Every check of a computed value against something outside the project names its source in
a comment. Seeds are fixed throughout, so the Monte Carlo checks are deterministic: they
either pass on every run or fail on every run.
"""

from __future__ import annotations

import json
import math
import time

import numpy as np
import pytest
from scipy import stats as sps  # type: ignore[import-untyped]

from jobkeeper.exceptions import ConfigError
from jobkeeper.stats import (
    Comparison,
    StatsInputError,
    compare_counts,
    compare_to_distribution,
    minimum_detectable_tvd,
)
from jobkeeper.stats.bootstrap import resampled_tvd_one, sampled_noise_tvd_one
from jobkeeper.stats.chisquare import MIN_EXPECTED, pool_plan, pooled_cells

KEYS8 = [format(i, "03b") for i in range(8)]
# A skewed 8-outcome distribution with two rare outcomes, so that pooling is exercised in
# the calibration runs (1000 shots: expected 2 and 3 shots on the rare outcomes).
SKEWED8 = np.array([0.35, 0.2, 0.15, 0.12, 0.1, 0.073, 0.005, 0.002])


def as_counts(vector: np.ndarray, keys: list[str] = KEYS8) -> dict[str, int]:
    return {key: int(value) for key, value in zip(keys, vector, strict=True)}


def rejection_interval_ok(rejections: int, trials: int, alpha: float) -> bool:
    # scipy.stats.binomtest (reference library): the rejection count must be compatible with
    # Binomial(trials, alpha) at the 0.1 % level, i.e. inside a 99.9 % binomial band.
    return bool(sps.binomtest(rejections, trials, alpha).pvalue >= 1e-3)


# --- Reference values --------------------------------------------------------------------


def test_homogeneity_matches_closed_form() -> None:
    # Row totals 100 and 100, column totals 50, 50, 100: expected 25, 25, 50 in both rows.
    # Pearson X² = 4·(5²/25) = 4 on 2 degrees of freedom. Published identity: the chi-square
    # survival function with 2 dof is exp(−x/2) (any statistics textbook), so p = e^{−2}.
    result = compare_counts({"0": 30, "1": 20, "2": 50}, {"0": 20, "1": 30, "2": 50})
    assert result.statistic == pytest.approx(4.0, rel=1e-12)
    assert result.dof == 2
    assert result.p_value == pytest.approx(math.exp(-2.0), rel=1e-12)
    # G = 2 Σ O ln(O/E) = 4·(30 ln 1.2 + 20 ln 0.8); same identity for its p-value.
    g = 4 * (30 * math.log(1.2) + 20 * math.log(0.8))
    assert result.g_p_value == pytest.approx(math.exp(-g / 2), rel=1e-12)
    assert result.verdict == "consistent"


def test_goodness_of_fit_matches_closed_form() -> None:
    # Expected 25, 25, 50 for 100 shots: X² = 1 + 1 + 0 = 2 on 2 dof, p = e^{−1}
    # (chi-square with 2 dof: survival exp(−x/2), textbook identity).
    result = compare_to_distribution({"0": 30, "1": 20, "2": 50}, {"0": 0.25, "1": 0.25, "2": 0.5})
    assert result.statistic == pytest.approx(2.0, rel=1e-12)
    assert result.p_value == pytest.approx(math.exp(-1.0), rel=1e-12)
    assert result.shots_b is None


@pytest.mark.parametrize("seed", range(5))
def test_homogeneity_matches_scipy_on_unpooled_tables(seed: int) -> None:
    # Reference: scipy.stats.chi2_contingency (Pearson and log-likelihood), tables large
    # enough that no pooling happens.
    rng = np.random.default_rng(seed)
    a = rng.multinomial(800, np.full(6, 1 / 6))
    b = rng.multinomial(1300, [0.1, 0.2, 0.2, 0.2, 0.15, 0.15])
    table = np.stack([a, b])
    pearson = sps.chi2_contingency(table, correction=False)
    g_test = sps.chi2_contingency(table, correction=False, lambda_="log-likelihood")
    keys = list("abcdef")
    result = compare_counts(as_counts(a, keys), as_counts(b, keys), bootstrap=100)
    assert result.p_value == pytest.approx(pearson.pvalue, rel=1e-9)
    assert result.g_p_value == pytest.approx(g_test.pvalue, rel=1e-9)
    assert result.statistic == pytest.approx(pearson.statistic, rel=1e-9)
    assert result.dof == 5
    assert not any("pooled" in note for note in result.notes)


@pytest.mark.parametrize("seed", range(5))
def test_goodness_of_fit_matches_scipy(seed: int) -> None:
    # Reference: scipy.stats.chisquare and scipy.stats.power_divergence (log-likelihood).
    rng = np.random.default_rng(100 + seed)
    probs = rng.dirichlet(np.ones(5)) * 0.9 + 0.02
    probs /= probs.sum()
    observed = rng.multinomial(2000, probs)
    keys = list("abcde")
    result = compare_to_distribution(as_counts(observed, keys), dict(zip(keys, probs, strict=True)))
    expected = probs * 2000
    assert result.p_value == pytest.approx(sps.chisquare(observed, expected).pvalue, rel=1e-9)
    g = sps.power_divergence(observed, expected, lambda_="log-likelihood")
    assert result.g_p_value == pytest.approx(g.pvalue, rel=1e-9)


def test_tvd_bhattacharyya_and_hellinger_by_hand() -> None:
    # Definitions (textbook: Bhattacharyya 1943; the Hellinger distance normalised as in
    # Le Cam & Yang): TVD = ½Σ|p−q|, BC = Σ√(p·q), H = √(1 − BC). Values worked out by hand.
    # p = (0.9, 0.1), q = (0.1, 0.9): TVD = ½(0.8 + 0.8) = 0.8; BC = √0.09 + √0.09 = 0.6;
    # H = √0.4 = 0.632456 (to six places).
    result = compare_counts({"0": 90, "1": 10}, {"0": 10, "1": 90}, bootstrap=100)
    assert result.tvd == pytest.approx(0.8)
    assert result.bhattacharyya_coefficient == pytest.approx(0.6, abs=1e-12)
    assert result.hellinger_distance == pytest.approx(0.632456, abs=1e-6)
    # Frequencies (0.25, 0.75) against exact (0.5, 0.5): TVD = 0.25;
    # BC = √0.125 + √0.375 = (√2 + √6)/4 = cos 15° = 0.965926; H = √(1 − 0.965926) = 0.184592.
    against = compare_to_distribution({"0": 25, "1": 75}, {"0": 0.5, "1": 0.5}, bootstrap=100)
    assert against.tvd == pytest.approx(0.25)
    assert against.bhattacharyya_coefficient == pytest.approx(0.965926, abs=1e-6)
    assert against.hellinger_distance == pytest.approx(0.184592, abs=1e-6)
    # Half the shots on an impossible outcome: BC = √(0.5·1) = 0.707107, H = 0.541196.
    exact = compare_to_distribution({"0": 50, "1": 50}, {"0": 1.0, "1": 0.0}, bootstrap=100)
    assert exact.verdict == "different"
    assert exact.tvd == pytest.approx(0.5)
    assert exact.bhattacharyya_coefficient == pytest.approx(0.707107, abs=1e-6)
    assert exact.hellinger_distance == pytest.approx(0.541196, abs=1e-6)
    assert "Bhattacharyya coefficient 0.7071, Hellinger distance 0.5412" in exact.summary()
    assert "fidelity" not in json.dumps(exact.to_json()).lower()


# --- Pooling ------------------------------------------------------------------------------


def test_pooling_matches_hand_pooled_table() -> None:
    # N = 1812 and the smaller run has 906 shots, so a column needs a total of at least
    # 5·1812/906 = 10 for both expected counts to reach 5. Columns 011, 100, 101 hold 5, 6
    # and 1 shots: they are pooled into one cell of 12. Reference: scipy.stats on the table
    # pooled by hand.
    a = {"000": 400, "001": 300, "010": 200, "011": 3, "100": 2, "101": 1}
    b = {"000": 390, "001": 310, "010": 198, "011": 2, "100": 4, "101": 0, "110": 0}
    pooled_by_hand = np.array([[400, 300, 200, 6], [390, 310, 198, 6]])
    reference = sps.chi2_contingency(pooled_by_hand, correction=False)
    result = compare_counts(a, b, bootstrap=100)
    assert result.p_value == pytest.approx(reference.pvalue, rel=1e-12)
    assert result.dof == 3
    assert any("3 rare outcome(s)" in note for note in result.notes)


@pytest.mark.parametrize("seed", range(30))
def test_every_expected_cell_at_least_five_after_pooling(seed: int) -> None:
    # Cochran's rule (common practice): every expected count ≥ 5 in the table tested.
    rng = np.random.default_rng(seed)
    k = int(rng.integers(2, 40))
    probs = rng.dirichlet(np.full(k, 0.3))
    x = rng.multinomial(int(rng.integers(20, 500)), probs)
    y = rng.multinomial(int(rng.integers(20, 500)), probs)
    keep = (x + y) > 0
    x, y = x[keep], y[keep]
    keys = [str(i) for i in range(x.size)]
    total = x.sum() + y.sum()
    kept, pooled = pool_plan(
        (x + y).astype(float), keys, MIN_EXPECTED * total / min(x.sum(), y.sum())
    )
    table = pooled_cells(np.stack([x, y]), kept, pooled)
    if table.shape[1] >= 2:
        expected = np.outer(table.sum(axis=1), table.sum(axis=0)) / total
        assert expected.min() >= MIN_EXPECTED - 1e-9
        # The pooled outcomes are the rarest ones.
        if pooled.size and kept.size:
            assert (x + y)[pooled].max() <= (x + y)[kept].min()
    # One sample against an exact distribution: pooled on expected counts.
    shots = int(rng.integers(10, 400))
    expected_counts = probs * shots
    kept, pooled = pool_plan(expected_counts, [str(i) for i in range(k)], MIN_EXPECTED)
    cells = pooled_cells(expected_counts, kept, pooled)
    if cells.size >= 2:
        assert cells.min() >= MIN_EXPECTED - 1e-9


def test_tiny_tables_say_too_few_shots() -> None:
    result = compare_counts({"00": 3, "11": 2}, {"00": 1, "11": 4})
    assert result.too_few_shots
    assert result.verdict == "consistent"
    assert result.p_value is None and result.dof is None
    assert any("Too few shots to tell" in note for note in result.notes)
    assert "too few shots to tell" in result.summary()
    assert any("only large differences can be detected" in note for note in result.notes)
    one = compare_to_distribution({"0": 3, "1": 1}, {"0": 0.5, "1": 0.5})
    assert one.too_few_shots and one.verdict == "consistent"
    assert "too few shots to tell" in one.summary()


def test_small_shot_warning_only_below_a_hundred() -> None:
    few = compare_counts({"0": 40, "1": 40}, {"0": 45, "1": 35}, bootstrap=100)
    many = compare_counts({"0": 400, "1": 400}, {"0": 450, "1": 350}, bootstrap=100)
    assert any("only large differences" in note for note in few.notes)
    assert not any("only large differences" in note for note in many.notes)


# --- Verdicts -----------------------------------------------------------------------------


def test_identical_tables_are_identical() -> None:
    counts = {"00": 512, "11": 488}
    result = compare_counts(counts, {"11": 488, "00": 512, "01": 0})
    assert result.verdict == "identical"
    assert result.tvd == 0.0 and result.bhattacharyya_coefficient == pytest.approx(1.0)
    assert result.hellinger_distance == pytest.approx(0.0, abs=1e-7)
    # Identical counts do not prove identical distributions: the interval starts at zero
    # but allows what sampling noise could hide.
    assert result.tvd_estimate == 0.0 and result.tvd_ci[0] == 0.0
    assert 0.0 < result.tvd_ci[1] < 0.1
    assert "identical" in result.summary()


def test_deterministic_rerun_must_match_exactly() -> None:
    a, b = {"00": 512, "11": 488}, {"00": 511, "11": 489}
    assert compare_counts(a, b).verdict == "consistent"
    strict = compare_counts(a, b, deterministic=True)
    assert strict.verdict == "different"
    assert any("deterministic" in note for note in strict.notes)
    assert "deterministic rerun must reproduce" in strict.summary()
    assert compare_counts(a, dict(a), deterministic=True).verdict == "identical"
    tiny = compare_counts({"0": 2}, {"0": 1, "1": 1}, deterministic=True)
    assert tiny.verdict == "different" and "too few" not in tiny.summary()


def test_one_outcome_everywhere() -> None:
    # A deterministic circuit measured on both sides with different shot counts.
    result = compare_counts({"101": 1000}, {"101": 400})
    assert result.verdict == "consistent" and not result.too_few_shots
    assert result.p_value == 1.0 and result.tvd == 0.0
    exact = compare_to_distribution({"101": 1000}, {"101": 1.0})
    assert exact.verdict == "identical"


def test_impossible_outcome_is_different_at_once() -> None:
    result = compare_to_distribution({"00": 500, "11": 499, "01": 1}, {"00": 0.5, "11": 0.5})
    assert result.verdict == "different"
    assert result.p_value == 0.0
    assert any("'01'" in note and "probability zero" in note for note in result.notes)
    assert "cannot come from" in result.summary()


def test_float_noise_probability_counts_as_impossible() -> None:
    # A simulator's zero amplitude squared comes out as ~1e-33, not 0.
    ideal = {"00": 0.5 - 1e-17, "11": 0.5, "01": 1e-33, "10": 1e-33}
    result = compare_to_distribution({"00": 500, "11": 499, "01": 1}, ideal)
    assert result.verdict == "different"
    assert any("'01'" in note for note in result.notes)
    assert compare_to_distribution({"00": 500, "11": 500}, ideal).verdict == "identical"


def test_clear_difference_is_different() -> None:
    result = compare_counts({"0": 600, "1": 400}, {"0": 400, "1": 600})
    assert result.verdict == "different"
    assert result.p_value is not None and result.p_value < 1e-10
    assert result.tvd_ci[0] > 0.1
    assert "differ" in result.summary()


def test_json_is_strict_and_complete() -> None:
    for result in (
        compare_counts({"0": 600, "1": 400}, {"0": 400, "1": 600}),
        compare_counts({"00": 3, "11": 2}, {"00": 1, "11": 4}),
        compare_to_distribution({"0": 5, "2": 1}, {"0": 1.0}),
    ):
        data = result.to_json()
        text = json.dumps(data, allow_nan=False)
        for key in ("verdict", "p_value", "tvd", "tvd_ci", "bhattacharyya_coefficient",
                    "hellinger_distance", "notes"):  # fmt: skip
            assert key in data
        assert json.loads(text)["tvd_ci"] == list(result.tvd_ci)


def test_bad_input_is_refused() -> None:
    for a in ({}, {"0": 0}, {"0": -1}, {"0": 1.5}, {0: 3}):
        with pytest.raises(StatsInputError):
            compare_counts(a, {"0": 1})  # type: ignore[arg-type]
    with pytest.raises(ConfigError):
        compare_to_distribution({"0": 1}, {"0": 0.5, "1": 0.4})
    with pytest.raises(ValueError):
        compare_counts({"0": 1}, {"0": 1}, alpha=1.5)
    with pytest.raises(StatsInputError):
        compare_counts({"0": 1}, {"0": 1}, bootstrap=10)


def test_seeded_and_symmetric() -> None:
    a, b = {"0": 510, "1": 300, "2": 190}, {"0": 480, "1": 330, "2": 160, "3": 5}
    assert compare_counts(a, b, seed=7) == compare_counts(a, b, seed=7)
    forward, backward = compare_counts(a, b, seed=7), compare_counts(b, a, seed=7)
    assert forward.tvd_ci == backward.tvd_ci and forward.p_value == backward.p_value


# --- Calibration, power, coverage (Monte Carlo, fixed seeds) -----------------------------


def test_two_sample_calibration_at_alpha() -> None:
    # 500 pairs from one distribution: rejections at α = 0.01 must be Binomial(500, 0.01)-
    # compatible (scipy.stats.binomtest, 99.9 % band). Measured: see the assertion message.
    rng = np.random.default_rng(20261201)
    draws = rng.multinomial(1000, SKEWED8, size=(500, 2))
    rejections = sum(
        compare_counts(as_counts(x), as_counts(y), bootstrap=100).verdict == "different"
        for x, y in draws
    )
    assert rejection_interval_ok(rejections, 500, 0.01), f"{rejections}/500 rejected"


def test_one_sample_calibration_at_alpha() -> None:
    rng = np.random.default_rng(20261202)
    draws = rng.multinomial(1000, SKEWED8, size=500)
    ideal = dict(zip(KEYS8, SKEWED8, strict=True))
    rejections = sum(
        compare_to_distribution(as_counts(x), ideal, bootstrap=100).verdict == "different"
        for x in draws
    )
    assert rejection_interval_ok(rejections, 500, 0.01), f"{rejections}/500 rejected"


def shifted_pair(tvd: float, spread: bool) -> tuple[np.ndarray, np.ndarray]:
    """Two 8-outcome distributions at total variation distance exactly ``tvd``.

    spread=True is the hardest case for the test (|p − q| proportional to the pooled
    probabilities, the equality case of Cauchy–Schwarz); spread=False moves mass between two
    outcomes only.
    """
    base = np.full(8, 1 / 8)
    if spread:
        signs = np.where(np.arange(8) % 2 == 0, 1.0, -1.0)
        delta = signs * tvd * 2 / 8
    else:
        delta = np.zeros(8)
        delta[0], delta[1] = tvd, -tvd
    p, q = base + delta / 2, base - delta / 2
    assert 0.5 * np.abs(p - q).sum() == pytest.approx(tvd)
    return p, q


@pytest.mark.parametrize("spread", [True, False])
def test_power_at_tvd_005_with_10000_shots(spread: bool) -> None:
    p, q = shifted_pair(0.05, spread)
    rng = np.random.default_rng(7 + spread)
    xs, ys = rng.multinomial(10_000, p, size=200), rng.multinomial(10_000, q, size=200)
    detected = sum(
        compare_counts(as_counts(x), as_counts(y), bootstrap=100).verdict == "different"
        for x, y in zip(xs, ys, strict=True)
    )
    assert detected / 200 >= 0.9, f"power {detected}/200"


def test_minimum_detectable_tvd_has_its_power() -> None:
    # At the worst-case shape, a TVD equal to minimum_detectable_tvd(...) should be detected
    # about 90 % of the time (noncentral chi-square approximation: generous band).
    shots = 2000
    smallest = minimum_detectable_tvd(shots, shots, 8, alpha=0.01, power=0.9)
    p, q = shifted_pair(smallest, spread=True)
    rng = np.random.default_rng(11)
    xs, ys = rng.multinomial(shots, p, size=300), rng.multinomial(shots, q, size=300)
    detected = sum(
        compare_counts(as_counts(x), as_counts(y), bootstrap=100).verdict == "different"
        for x, y in zip(xs, ys, strict=True)
    )
    assert 0.82 <= detected / 300 <= 0.97, f"power {detected}/300 at TVD {smallest:.4f}"
    # More shots, smaller detectable distance; one sample beats two of the same size.
    assert minimum_detectable_tvd(4 * shots, 4 * shots, 8) < smallest
    assert minimum_detectable_tvd(shots, None, 8) < smallest


def test_bootstrap_over_1024_outcomes_is_fast() -> None:
    rng = np.random.default_rng(5)
    probs = rng.dirichlet(np.ones(1024))
    keys = [format(i, "010b") for i in range(1024)]
    a = as_counts(rng.multinomial(10_000, probs), keys)
    b = as_counts(rng.multinomial(10_000, probs), keys)
    # CPU time (all threads), not wall time, so other work on the machine cannot fail this.
    # Measured: about 0.6 s CPU, 0.3 s wall on two idle cores.
    started = time.process_time()
    result: Comparison = compare_counts(a, b, bootstrap=2000)
    elapsed = time.process_time() - started
    assert elapsed < 3.0, f"{elapsed:.2f} s CPU"
    assert result.tvd_ci[0] <= result.tvd_ci[1]


def test_noise_floor_by_sampling_matches_multinomial() -> None:
    # Two ways to draw the same quantity (a multinomial is a sum of categorical draws,
    # textbook): the sampled path used for references with more outcomes than shots must
    # agree with the multinomial path in mean, to Monte Carlo accuracy.
    rng = np.random.default_rng(3)
    ref = rng.dirichlet(np.ones(300))
    sampled = sampled_noise_tvd_one(np.random.default_rng(1), ref, 200, 2000)
    multinomial = resampled_tvd_one(np.random.default_rng(2), ref, 200, ref, 2000)
    spread = math.hypot(sampled.std(), multinomial.std()) / math.sqrt(2000)
    assert abs(sampled.mean() - multinomial.mean()) < 5 * spread


def test_large_reference_with_few_shots_is_fast() -> None:
    # A 16-qubit reference distribution against 1000 shots: the noise floor must not cost a
    # multinomial over all 65,536 outcomes per replicate.
    rng = np.random.default_rng(8)
    probs = rng.dirichlet(np.ones(1 << 16))
    keys = [format(i, "016b") for i in range(1 << 16)]
    counts = as_counts(rng.multinomial(1000, probs), keys)
    started = time.process_time()
    result = compare_to_distribution(counts, dict(zip(keys, probs, strict=True)))
    assert time.process_time() - started < 3.0
    assert result.tvd_noise > 0.3  # most of 1000 shots land on distinct outcomes


def test_minimum_detectable_tvd_against_normal_theory() -> None:
    # With one degree of freedom the noncentral chi-square test is a two-sided z-test, so the
    # noncentrality for power 0.8 at α = 0.05 is (z_0.975 + z_0.8)² ≈ 7.85 (textbook; it is
    # Cohen's 1988 figure of N = 785 for effect size w = 0.1). Our bound is λ = 4·n·TVD².
    lam = (sps.norm.isf(0.025) + sps.norm.isf(0.2)) ** 2
    assert lam == pytest.approx(7.85, abs=0.01)
    expected = math.sqrt(lam / (4 * 1000))
    assert minimum_detectable_tvd(1000, None, 2, alpha=0.05, power=0.8) == pytest.approx(
        expected, rel=1e-4
    )
    # Two samples of n each have n_eff = n/2.
    assert minimum_detectable_tvd(2000, 2000, 2, alpha=0.05, power=0.8) == pytest.approx(
        expected, rel=1e-4
    )
    with pytest.raises(StatsInputError):
        minimum_detectable_tvd(1000, 1000, 1)
