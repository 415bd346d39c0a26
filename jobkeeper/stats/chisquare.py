"""Pearson chi-square and G tests on pooled tables, and the power of the chi-square test.

Pooling follows Cochran's rule (every expected count at least 5); the p-values come from
``scipy.stats`` so a referee can recompute them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray
from scipy import stats as sps  # type: ignore[import-untyped]
from scipy.optimize import brentq  # type: ignore[import-untyped]

from jobkeeper.stats.inputs import StatsInputError

#: Smallest expected count per cell for the chi-square approximation (Cochran's rule, common
#: practice): below it the p-values of Pearson's and the G statistic are not trustworthy.
MIN_EXPECTED = 5.0

IntArray = NDArray[np.int64]
FloatArray = NDArray[np.float64]


def pool_plan(weights: FloatArray, keys: list[str], big_enough: float) -> tuple[IntArray, IntArray]:
    """Which cells stay on their own and which are pooled into one "other" cell.

    ``weights`` are the quantities that must reach ``big_enough`` (column totals, or expected
    counts). The rarest cells (ties broken by outcome label, so the plan is deterministic)
    are pooled; if the pool itself is still too small, the next rarest cells join it until it
    is big enough or nothing is left. Returns (kept indices, pooled indices).
    """
    order = np.lexsort((np.asarray(keys, dtype=str), weights))  # by weight, then label
    small = int(np.searchsorted(weights[order], big_enough, side="left"))
    if small:
        # Grow the pool with the next rarest cells until it is big enough itself.
        running = np.cumsum(weights[order])
        if running[small - 1] < big_enough:
            small = min(int(np.searchsorted(running, big_enough, side="left")) + 1, order.size)
    return order[small:].astype(np.int64), order[:small].astype(np.int64)


def pooled_cells(values: NDArray[np.generic], kept: IntArray, pooled: IntArray) -> FloatArray:
    """``values`` (last axis = outcomes) reduced to the kept cells plus one pooled cell."""
    cells = [values[..., kept].astype(np.float64)]
    if pooled.size:
        cells.append(values[..., pooled].sum(axis=-1, keepdims=True).astype(np.float64))
    return np.concatenate(cells, axis=-1)


@dataclass(frozen=True)
class TestResult:
    """One chi-square family test on a pooled table (None everywhere when none could run)."""

    p_value: float | None
    g_p_value: float | None
    statistic: float | None
    dof: int | None
    cells: int
    pooled_outcomes: int
    pooled_share: float


def homogeneity_test(x: IntArray, y: IntArray, keys: list[str]) -> TestResult:
    """Pearson chi-square and G tests of homogeneity on the pooled 2×k table."""
    nx, ny = int(x.sum()), int(y.sum())
    total = nx + ny
    columns = (x + y).astype(np.float64)
    # Expected count in row r, column i is n_r·c_i/N; both rows reach MIN_EXPECTED exactly
    # when the column total reaches MIN_EXPECTED·N/min(n_x, n_y). Pooling depends on the
    # column totals only, which under "no difference" carry no information about the rows.
    threshold = MIN_EXPECTED * total / min(nx, ny)
    kept, pooled = pool_plan(columns, keys, threshold)
    table = pooled_cells(np.stack([x, y]), kept, pooled)
    share = float(columns[pooled].sum() / total) if pooled.size else 0.0
    if len(keys) == 1:
        # One outcome in both runs: given the margins only one table is possible, so the
        # exact conditional p-value is 1 and there is nothing for an approximation to do.
        return TestResult(1.0, 1.0, 0.0, 0, 1, 0, 0.0)
    if table.shape[1] < 2:
        return TestResult(None, None, None, None, table.shape[1], int(pooled.size), share)
    pearson = sps.chi2_contingency(table, correction=False)
    g_test = sps.chi2_contingency(table, correction=False, lambda_="log-likelihood")
    return TestResult(
        p_value=float(pearson.pvalue),
        g_p_value=float(g_test.pvalue),
        statistic=float(pearson.statistic),
        dof=int(pearson.dof),
        cells=table.shape[1],
        pooled_outcomes=int(pooled.size),
        pooled_share=share,
    )


def goodness_of_fit_test(observed: IntArray, probs: FloatArray, keys: list[str]) -> TestResult:
    """Pearson chi-square and G goodness-of-fit tests, pooled on expected counts.

    Pooling here depends only on the reference distribution and the number of shots, never
    on the observed counts, so it cannot bias the test.
    """
    shots = int(observed.sum())
    expected = probs * shots
    # The relative slack absorbs float rounding in n·p (e.g. 1000 × 0.005).
    kept, pooled = pool_plan(expected, keys, MIN_EXPECTED * (1 - 1e-12))
    obs_cells = pooled_cells(observed, kept, pooled)
    exp_cells = pooled_cells(expected, kept, pooled)
    share = float(probs[pooled].sum()) if pooled.size else 0.0
    if obs_cells.size < 2:
        if len(keys) == 1:
            return TestResult(1.0, 1.0, 0.0, 0, 1, 0, 0.0)
        return TestResult(None, None, None, None, obs_cells.size, int(pooled.size), share)
    # power_divergence wants the two totals equal to float precision; rescale the expected
    # cells so rounding in the pooled sums cannot trip that check.
    exp_cells = exp_cells * (shots / exp_cells.sum())
    pearson = sps.power_divergence(obs_cells, exp_cells, lambda_="pearson")
    g_test = sps.power_divergence(obs_cells, exp_cells, lambda_="log-likelihood")
    return TestResult(
        p_value=float(pearson.pvalue),
        g_p_value=float(g_test.pvalue),
        statistic=float(pearson.statistic),
        dof=obs_cells.size - 1,
        cells=obs_cells.size,
        pooled_outcomes=int(pooled.size),
        pooled_share=share,
    )


def minimum_detectable_tvd(
    shots_a: int,
    shots_b: int | None,
    k: int,
    alpha: float = 0.01,
    power: float = 0.9,
) -> float:
    """Smallest TVD the chi-square test detects with the given power, whatever its shape.

    Under an alternative the Pearson statistic is approximately noncentral chi-square with
    noncentrality λ = n_eff · Σ (p_i − q_i)² / m_i, where m is the pooled distribution (for
    one sample: the reference) and n_eff = n_a·n_b/(n_a+n_b) (one sample: n). By
    Cauchy–Schwarz, (Σ|p_i − q_i|)² ≤ Σ (p_i − q_i)²/m_i · Σ m_i, so λ ≥ 4·n_eff·TVD² for
    every way of spreading a given TVD over the k outcomes: a TVD of sqrt(λ*/(4 n_eff)),
    where λ* gives the asked power, is detected at least that often (to the accuracy of the
    noncentral approximation). ``shots_b=None`` means one sample against an exact
    distribution. Returns at most 1.0.
    """
    if k < 2:
        raise StatsInputError("need at least two outcomes (cells) to detect a difference")
    if shots_a <= 0 or (shots_b is not None and shots_b <= 0):
        raise StatsInputError("shot counts must be positive")
    if not (0 < alpha < 1 and 0 < power < 1):
        raise StatsInputError("alpha and power must lie strictly between 0 and 1")
    if power <= alpha:
        return 0.0  # rejecting at random already has power alpha
    n_eff = shots_a if shots_b is None else shots_a * shots_b / (shots_a + shots_b)
    return min(math.sqrt(_noncentrality_for_power(k - 1, alpha, power) / (4 * n_eff)), 1.0)


@lru_cache(maxsize=256)
def _noncentrality_for_power(dof: int, alpha: float, power: float) -> float:
    # Cached: every comparison quotes this for its table size, and reruns repeat sizes.
    critical = float(sps.chi2.isf(alpha, dof))

    def shortfall(lam: float) -> float:
        return float(sps.ncx2.sf(critical, dof, lam)) - power

    high = 1.0
    while shortfall(high) < 0:
        high *= 2
    return float(brentq(shortfall, 0.0, high, xtol=1e-8, rtol=1e-10))
