"""Expectation values of Pauli products from the outcomes of one measurement setting.

A setting measured ``width`` bits (bit j of an outcome is bit j of the count key from the
right). Each of its terms is a Pauli product that the basis change turned into a Z
product on some of those bits (``bits``, ascending), so a shot's value of the term is
the product over its bits of a per-bit factor: +1 for a 0 and −1 for a 1, or, with
readout mitigation, the corrected factors of :mod:`jobkeeper.stats.readout`.

Per setting (the textbook sample mean and variance; e.g. Rice, "Mathematical Statistics
and Data Analysis", §7.3): the per-shot value v = Σ c_i·t_i is averaged over the N
shots; its sample variance s² (divisor N − 1) gives the variance of the mean s²/N. That
variance is of the whole sum, so it carries the covariances between the setting's
terms. Per term the same with v replaced by t_i.

This is the term-by-term route, taken with readout mitigation (per-bit factors other
than ±1) and for settings wider than :data:`jobkeeper.stats.parity.MAX_WIDTH`; without
mitigation, :mod:`jobkeeper.stats.parity` computes the same numbers for all terms at
once, exactly.

Determinism. These numbers are signed later and re-derived by a verifier on another
machine, so they must come out the same to the last bit anywhere: every per-outcome
quantity is built by elementwise IEEE-754 operations in a fixed order (factors by
ascending bit, terms in the order given), which numpy computes identically everywhere,
and every sum over outcomes is :func:`math.fsum` (correctly rounded, so its order does
not matter). No numpy reduction over floats is used (their blocking and vector paths
may differ between builds).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import numpy.typing as npt

from jobkeeper.counts import CountTable
from jobkeeper.stats.inputs import StatsInputError, check_counts

Floats = npt.NDArray[np.float64]
Bits = npt.NDArray[np.bool_]

#: The standard normal's 0.975 quantile: the half-width of a 95% interval in standard
#: errors (scipy.stats.norm.ppf(0.975), checked in the tests).
Z_95 = 1.959963984540054

#: Per-bit factors (value for a 0, value for a 1) of an unmitigated Z measurement.
PLAIN_FACTORS = (1.0, -1.0)


@dataclass(frozen=True)
class Outcomes:
    """One setting's outcomes: ``rows[k]`` the ASCII bit string of outcome k (bit j is
    the j-th character from the right); ``weights[k]`` its count (sampled) or
    probability (exact); ``total`` the shots (or the summed probability); ``counts``
    the counts as integers (sampled only)."""

    rows: npt.NDArray[np.uint8]
    weights: Floats
    total: float
    shots: int | None
    counts: npt.NDArray[np.int64] | None = None

    @cached_property
    def bits(self) -> Bits:
        """``bits[j, k]``: bit j of outcome k."""
        width = self.rows.shape[1]
        bits: Bits = (self.rows[:, ::-1] == ord("1")).T.reshape(width, self.rows.shape[0])
        return bits

    @cached_property
    def codes(self) -> npt.NDArray[np.int64]:
        """Each outcome as an integer (bit j of the code is bit j of the outcome)."""
        width = self.rows.shape[1]
        if width > 52:
            raise StatsInputError(f"outcomes of {width} bits have no integer codes here")
        # Sums of distinct powers of two below 2^53: exact as doubles in any order.
        powers = np.ldexp(1.0, np.arange(width - 1, -1, -1))  # exact powers of two
        codes: npt.NDArray[np.int64] = ((self.rows == ord("1")) @ powers).astype(np.int64)
        return codes


@dataclass(frozen=True)
class TermMoments:
    """A term's (or a setting's) mean, the variance of that mean from the shots, and the
    mean's derivative by each calibration parameter asked for (the delta method's
    ingredient; the parameters' variances are the caller's)."""

    mean: float
    variance: float
    gradient: tuple[float, ...] = ()


@dataclass(frozen=True)
class SettingMoments:
    """The setting's value Σ c_i·t_i and each term's moments."""

    value: TermMoments
    terms: tuple[TermMoments, ...]


def read_counts(counts: Mapping[str, int], width: int, what: str) -> Outcomes:
    """The outcomes of sampled counts whose keys are ``width``-bit strings."""
    rows, values = outcome_rows(counts, width, what)
    shots = int(values.sum()) if len(values) else 0
    if shots < 2:
        raise StatsInputError(f"{what}: a sampled estimate needs at least 2 shots, got {shots}")
    return Outcomes(rows, values.astype(np.float64), float(shots), shots, values)


def read_probabilities(probabilities: Mapping[str, float], width: int, what: str) -> Outcomes:
    """The outcomes of an exact distribution over ``width``-bit strings."""
    keys = list(probabilities)
    weights = np.array([float(probabilities[k]) for k in keys], dtype=np.float64)
    if not np.all(np.isfinite(weights)) or np.any(weights < 0):
        raise StatsInputError(f"{what}: probabilities must be finite and not negative")
    total = math.fsum(weights.tolist())
    if abs(total - 1.0) > 1e-6:
        raise StatsInputError(f"{what}: probabilities sum to {total!r}, not 1")
    return Outcomes(_key_rows(keys, width, what), weights, total, None)


def outcome_rows(
    counts: Mapping[str, int], width: int, what: str
) -> tuple[npt.NDArray[np.uint8], npt.NDArray[np.int64]]:
    """Counts as rows of ASCII bit strings (``width`` wide) and their counts (in the
    mapping's order: every use of them is a sum that does not depend on it)."""
    if isinstance(counts, CountTable):
        rows, values = counts.arrays()
        if rows.shape[1] != width or np.any((rows != ord("0")) & (rows != ord("1"))):
            raise StatsInputError(f"{what}: count keys must be {width}-bit strings")
        return rows, values
    keys = list(counts)
    values = np.fromiter(counts.values(), dtype=np.int64, count=len(keys))
    try:
        total = sum(counts.values())
    except TypeError:
        total = None
    if type(total) is not int or total != int(values.sum()) or (len(keys) and values.min() < 0):
        # Not plain whole numbers: the general check says what is wrong.
        clean = check_counts(what, counts)
        keys, values = list(clean), np.array(list(clean.values()), dtype=np.int64)
    return _key_rows(keys, width, what), values


def _key_rows(keys: Sequence[str], width: int, what: str) -> npt.NDArray[np.uint8]:
    # One pass in C: the keys joined by newlines must be rows of exactly `width` zeros
    # and ones, each followed by its newline.
    try:
        joined = "\n".join(keys) + "\n" if keys else ""
        data = joined.encode("ascii")
    except (TypeError, UnicodeEncodeError):
        raise StatsInputError(f"{what}: count keys must be strings of 0 and 1") from None
    if len(data) != (width + 1) * len(keys):
        raise StatsInputError(f"{what}: count keys must be {width}-bit strings")
    rows = np.frombuffer(data, dtype=np.uint8).reshape(len(keys), width + 1)
    bits = rows[:, :width]
    # c | 1 is ord("1") only for the characters 0 and 1.
    if np.any(rows[:, width] != ord("\n")) or np.any((bits | 1) != ord("1")):
        raise StatsInputError(f"{what}: count keys must be {width}-bit strings of 0 and 1")
    return bits


def setting_moments(
    outcomes: Outcomes,
    coefficients: Sequence[float],
    term_bits: Sequence[Sequence[int]],
    factors: Sequence[tuple[float, float]] | None = None,
    derivatives: Sequence[Mapping[int, tuple[float, float]]] = (),
) -> SettingMoments:
    """Means and variances of the setting's value and of each term.

    ``factors[j]`` are bit j's per-shot factors for a 0 and a 1 (default ±1).
    ``derivatives[p]`` maps the bits whose factors depend on calibration parameter p to
    those factors' derivatives by it; each mean's gradient follows (the mean is linear in
    each bit's factors)."""
    width = outcomes.bits.shape[0]
    table = list(factors) if factors is not None else [PLAIN_FACTORS] * width
    per_bit = [_factor_array(outcomes.bits[j], table[j]) for j in range(width)]
    count = outcomes.bits.shape[1]
    value = np.zeros(count)
    value_gradient = [np.zeros(count) for _ in derivatives]
    terms = []
    for coefficient, bits in zip(coefficients, term_bits, strict=True):
        shot_values = _product([per_bit[j] for j in bits], count)
        value = value + coefficient * shot_values
        gradient = []
        for p, touched in enumerate(derivatives):
            slope = np.zeros(count)
            for j in bits:
                if j in touched:
                    arrays = [
                        _factor_array(outcomes.bits[k], touched[j]) if k == j else per_bit[k]
                        for k in bits
                    ]
                    slope = slope + _product(arrays, count)
            gradient.append(_mean(outcomes, slope))
            value_gradient[p] = value_gradient[p] + coefficient * slope
        terms.append(_moments(outcomes, shot_values, gradient))
    total = _moments(outcomes, value, [_mean(outcomes, g) for g in value_gradient])
    return SettingMoments(total, tuple(terms))


def _factor_array(bits: Bits, factor: tuple[float, float]) -> Floats:
    return np.where(bits, factor[1], factor[0])


def _product(arrays: Sequence[Floats], count: int) -> Floats:
    out = np.ones(count)
    for array in arrays:
        out = out * array
    return out


def _mean(outcomes: Outcomes, values: Floats) -> float:
    return math.fsum((outcomes.weights * values).tolist()) / outcomes.total


def _moments(outcomes: Outcomes, values: Floats, gradient: Sequence[float]) -> TermMoments:
    mean = _mean(outcomes, values)
    if outcomes.shots is None:
        return TermMoments(mean, 0.0, tuple(gradient))
    deviation = values - mean
    spread = math.fsum((outcomes.weights * (deviation * deviation)).tolist())
    return TermMoments(mean, spread / (outcomes.shots - 1) / outcomes.shots, tuple(gradient))


def normal_interval(value: float, standard_error: float) -> tuple[float, float]:
    """The 95% interval value ± z·standard error (normal approximation; common practice)."""
    half = Z_95 * standard_error
    return value - half, value + half
