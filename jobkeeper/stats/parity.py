"""The moments of a setting without readout correction, for all its terms at once.

Without correction a term's per-shot value is ±1 by the parity of its bits: the sign of
outcome b for the term with bit mask m is (−1)^|m ∧ b|, the (m, b) entry of the
unnormalised Walsh–Hadamard matrix of order 2^width (textbook; e.g. Arndt, "Matters
Computational", ch. 23). The fast transform of the outcome histogram n gives every
mask's signed count S_m = Σ_b n_b·(−1)^|m ∧ b| at once, in integers.

That is all a sampled setting needs, and all of it exact (the textbook sample mean and
variance, rewritten):

- term i (mask m_i): mean S_i/N; variance of the mean (N² − S_i²)/(N²(N − 1));
- the setting's per-shot value v = Σ c_i·(±1): its mean is Σ c_i·S_i/N; the sum of
  squared deviations is Σ_ij c_i·c_j·(N·S[m_i ⊕ m_j] − S_i·S_j)/N, since the product of
  two terms' signs is the sign of the mask m_i ⊕ m_j — the covariances between the
  setting's terms are in it. (A setting of t terms costs t² integer products: a
  thousand terms in one setting, 16 bits, 10^5 shots took 0.17 s.)

The coefficients are doubles, i.e. exact binary fractions, so both sums are evaluated
in exact rational arithmetic and rounded once: the same bits on every machine, and the
correctly rounded value. An exact distribution is transformed in floating point instead
(the butterflies' fixed pattern keeps the result the same everywhere).

Past :data:`MAX_WIDTH` bits the 2^width table is too big and the caller takes the
term-by-term route (:func:`jobkeeper.stats.expectation.setting_moments`).
"""

from __future__ import annotations

from collections.abc import Sequence
from fractions import Fraction
from functools import cache

import numpy as np
import numpy.typing as npt
from scipy.linalg import hadamard  # type: ignore[import-untyped]

from jobkeeper.stats.expectation import Outcomes, SettingMoments, TermMoments

#: Widest setting transformed as a whole (a table of 2^16 entries).
MAX_WIDTH = 16

Ints = npt.NDArray[np.int64]
Floats = npt.NDArray[np.float64]


def transform(table: npt.NDArray[np.int64] | npt.NDArray[np.float64]) -> npt.NDArray[np.generic]:
    """The unnormalised Walsh–Hadamard transform of a table of 2^w entries (a new array):
    entry m of the result is Σ_b table[b]·(−1)^|m ∧ b|."""
    out = table.copy()
    half = 1
    while half < out.shape[0]:
        pairs = out.reshape(-1, 2, half)
        low = pairs[:, 0, :].copy()
        pairs[:, 0, :] += pairs[:, 1, :]
        np.subtract(low, pairs[:, 1, :], out=pairs[:, 1, :])
        half *= 2
    return out


def signed_counts(histogram: Floats) -> npt.NDArray[np.int64]:
    """:func:`transform` of whole counts, by two products with Hadamard matrices
    (H_a ⊗ H_b acting on the table as a 2^a × 2^b matrix). Every partial sum is a whole
    number no larger than the shots, so the floating-point products are exact in any
    order the linear algebra library picks."""
    width = histogram.shape[0].bit_length() - 1
    high = width // 2
    table = histogram.reshape(1 << high, 1 << (width - high))
    product = _hadamard(high) @ table @ _hadamard(width - high)
    return np.rint(product).astype(np.int64).reshape(-1)


@cache
def _hadamard(bits: int) -> Floats:
    # Sylvester's construction: entry (i, j) is (−1)^|i ∧ j| (scipy.linalg.hadamard).
    matrix: Floats = hadamard(1 << bits).astype(np.float64)
    return matrix


def fits(width: int) -> bool:
    return width <= MAX_WIDTH


def parity_moments(
    outcomes: Outcomes, coefficients: Sequence[float], masks: Sequence[int]
) -> SettingMoments:
    """The setting's and each term's moments without readout correction; term i is the
    Z product on the bits set in ``masks[i]``."""
    size = 1 << outcomes.rows.shape[1]
    if outcomes.counts is None:
        signed = transform(np.bincount(outcomes.codes, weights=outcomes.weights, minlength=size))
        means = [float(signed[m]) / outcomes.total for m in masks]
        value = Fraction(0)
        for c, m in zip(coefficients, means, strict=True):
            value += Fraction(c) * Fraction(m)
        return SettingMoments(
            TermMoments(float(value), 0.0), tuple(TermMoments(m, 0.0) for m in means)
        )
    # Whole counts as doubles: exact (below 2^53), and a key seen in two rows adds up.
    histogram = np.bincount(outcomes.codes, weights=outcomes.weights, minlength=size)
    table = signed_counts(histogram.astype(np.float64, copy=False))
    index = np.asarray(masks, dtype=np.int64)
    sums = [int(s) for s in table[index]]
    n = outcomes.shots
    assert n is not None
    terms = tuple(TermMoments(s / n, (n * n - s * s) / (n * n * (n - 1))) for s in sums)
    # Coefficients as whole numbers over one power of two: exact products and sums.
    scaled, shift = _common_scale(coefficients)
    total = sum(a * s for a, s in zip(scaled, sums, strict=True))
    # Σ_ij a_i·a_j·(n·S[m_i ⊕ m_j] − S_i·S_j) = n·Σ_ij a_i·a_j·S[m_i ⊕ m_j] − total²,
    # in Python integers (object arrays: numpy loops, Python arithmetic, exact).
    pairs = table[index[:, None] ^ index[None, :]].astype(object)
    weights = np.array(scaled, dtype=object)
    squares = n * int(weights.dot(pairs.dot(weights))) - total * total
    mean = Fraction(total, n << shift)
    variance = Fraction(squares, (n * n * (n - 1)) << (2 * shift))
    return SettingMoments(TermMoments(float(mean), float(variance)), terms)


def _common_scale(values: Sequence[float]) -> tuple[list[int], int]:
    """Integers a_i and a shift k with values[i] = a_i / 2^k exactly."""
    ratios = [Fraction(v) for v in values]
    shift = max((r.denominator.bit_length() - 1 for r in ratios), default=0)
    return [r.numerator << (shift - (r.denominator.bit_length() - 1)) for r in ratios], shift
