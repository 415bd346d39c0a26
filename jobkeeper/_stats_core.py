"""The numerical core of :mod:`jobkeeper.stats`: input checks, pooling, tests, bootstrap.

Kept apart from the public module so that the statistics can be read (and reviewed) without
the wording of verdicts, and the wording without the numerics.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from concurrent.futures import ThreadPoolExecutor
from contextlib import nullcontext
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray
from scipy import stats as sps  # type: ignore[import-untyped]
from scipy.optimize import brentq  # type: ignore[import-untyped]

from jobkeeper.exceptions import ConfigError

#: Smallest expected count per cell for the chi-square approximation (Cochran's rule, common
#: practice): below it the p-values of Pearson's and the G statistic are not trustworthy.
MIN_EXPECTED = 5.0

#: Probabilities at or below this are float noise (see check_probabilities).
NEGLIGIBLE_PROBABILITY = 1e-12

#: Bound on bootstrap work (resampled cells): keeps a comparison interactive even for tables
#: with hundreds of thousands of distinct outcomes, at the price of fewer replicates there.
MAX_BOOTSTRAP_CELLS = 1 << 24
#: Fewest replicates we ever use; below this percentile intervals are meaningless.
MIN_BOOTSTRAP = 100
#: Replicates for the mean TVD under "no difference": a mean needs far fewer than a tail.
NOISE_REPS = 200
#: ...and at least this many, however large the table (a mean settles quickly).
NOISE_FEWEST = 10
#: Rows per vectorised chunk are chosen so that one chunk holds about this many cells.
_CHUNK_CELLS = 1 << 22
#: Above this many resampled cells, the two sides are drawn in two threads.
_THREAD_CELLS = 1 << 20

IntArray = NDArray[np.int64]
FloatArray = NDArray[np.float64]


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


def _rows_per_chunk(cells: int) -> int:
    return max(1, _CHUNK_CELLS // max(cells, 1))


def bootstrap_reps(requested: int, cells: int, fewest: int = MIN_BOOTSTRAP) -> int:
    """Replicates actually used: as asked, unless that would exceed MAX_BOOTSTRAP_CELLS."""
    if requested * cells <= MAX_BOOTSTRAP_CELLS:
        return requested
    return max(fewest, MAX_BOOTSTRAP_CELLS // cells)


def resampled_tvd_two(
    rngs: tuple[np.random.Generator, np.random.Generator],
    px: FloatArray,
    nx: int,
    py: FloatArray,
    ny: int,
    reps: int,
) -> FloatArray:
    """TVD between independent multinomial resamples of (nx, px) and (ny, py), per replicate.

    Vectorised over replicates in chunks so memory stays bounded for large tables; no loop
    over shots or outcomes. Each side has its own random stream, so the two sides can be
    drawn in two threads (numpy releases the GIL while sampling) and the numbers do not
    depend on whether they were.
    """
    out = np.empty(reps, dtype=np.float64)
    step = _rows_per_chunk(px.size)
    threaded = reps * px.size >= _THREAD_CELLS
    exact = nx * ny < 2**62
    with ThreadPoolExecutor(max_workers=2) if threaded else nullcontext() as pool:
        for start in range(0, reps, step):
            rows = min(reps, start + step) - start
            if pool is not None:
                fx = pool.submit(rngs[0].multinomial, nx, px, size=rows)
                fy = pool.submit(rngs[1].multinomial, ny, py, size=rows)
                rx, ry = fx.result(), fy.result()
            else:
                rx = rngs[0].multinomial(nx, px, size=rows)
                ry = rngs[1].multinomial(ny, py, size=rows)
            if exact:
                # Integer arithmetic (|x·ny − y·nx|) is exact until the last division.
                diff = np.abs(rx * ny - ry * nx).sum(axis=1) / (2.0 * nx * ny)
            else:  # shot counts so large that x·ny could overflow int64
                diff = 0.5 * np.abs(rx / nx - ry / ny).sum(axis=1)
            out[start : start + rows] = diff
    return out


def resampled_tvd_one(
    rng: np.random.Generator, draw_p: FloatArray, shots: int, ref: FloatArray, reps: int
) -> FloatArray:
    """TVD between multinomial resamples of (shots, draw_p) and the fixed distribution ref.

    ``draw_p`` and ``ref`` share an index; mass of ``ref`` outside the arrays must be added by
    the caller (a resample never lands there, so it contributes a constant).
    """
    out = np.empty(reps, dtype=np.float64)
    step = _rows_per_chunk(draw_p.size)
    for start in range(0, reps, step):
        stop = min(reps, start + step)
        sample = rng.multinomial(shots, draw_p, size=stop - start)
        out[start:stop] = 0.5 * np.abs(sample / shots - ref).sum(axis=1)
    return out


def sampled_noise_tvd_one(
    rng: np.random.Generator, ref: FloatArray, shots: int, reps: int
) -> FloatArray:
    """TVD between samples of ``shots`` draws from ``ref`` and ``ref`` itself, per replicate.

    The same quantity as ``resampled_tvd_one(rng, ref, shots, ref, reps)``, computed from
    the draws rather than from a multinomial over every outcome: for a reference with far
    more outcomes than shots (a 20-qubit statevector, 1000 shots) it costs O(reps·shots)
    instead of O(reps·outcomes). Unobserved outcomes contribute their probability, so
    TVD = ½ (1 + Σ_observed (|c/n − p| − p)).
    """
    cdf = np.cumsum(ref)
    cdf /= cdf[-1]
    out = np.empty(reps, dtype=np.float64)
    step = max(1, _CHUNK_CELLS // max(shots, 1))
    for start in range(0, reps, step):
        rows = min(reps, start + step) - start
        draws = np.searchsorted(cdf, rng.random((rows, shots)), side="right")
        draws = np.minimum(draws, ref.size - 1)  # guard the top end against rounding
        flat = (draws + np.arange(rows)[:, None] * ref.size).ravel()
        cells, counts = np.unique(flat, return_counts=True)
        probs = ref[cells % ref.size]
        terms = np.abs(counts / shots - probs) - probs
        sums = np.bincount(cells // ref.size, weights=terms, minlength=rows)
        out[start : start + rows] = 0.5 * (1.0 + sums)
    return out


def basic_interval(
    estimate: float, replicates: FloatArray, confidence: float
) -> tuple[float, float]:
    """The basic (reverse-percentile) bootstrap interval, clipped to [0, 1].

    Why not the plain percentile interval: the observed TVD is biased upwards (sampling noise
    only ever adds distance), and the bootstrap TVDs are biased upwards again around it, so
    the percentile interval sits about two biases above the truth. In our simulations it
    covered the true TVD in 0-10 % of trials for typical tables. Reflecting the bootstrap
    quantiles about the estimate (2θ̂ - q) removes one bias and the worst of that.
    """
    low_q, high_q = np.quantile(replicates, [(1 - confidence) / 2, (1 + confidence) / 2])
    low = min(max(2 * estimate - float(high_q), 0.0), 1.0)
    high = min(max(2 * estimate - float(low_q), 0.0), 1.0)
    return low, high


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
