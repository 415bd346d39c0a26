"""Multinomial resampling for :mod:`jobkeeper.stats`: the draws, and TVDs of resamples.

Vectorised over replicates with numpy (no loop over shots or outcomes), in chunks so that
memory stays bounded for tables with many outcomes.
"""

from __future__ import annotations

from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from contextlib import nullcontext

import numpy as np
from numpy.typing import NDArray

from jobkeeper.stats.inputs import MIN_BOOTSTRAP

#: Bound on bootstrap work (resampled cells): keeps a comparison interactive even for tables
#: with hundreds of thousands of distinct outcomes, at the price of fewer replicates there.
MAX_BOOTSTRAP_CELLS = 1 << 24
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


def _rows_per_chunk(cells: int) -> int:
    return max(1, _CHUNK_CELLS // max(cells, 1))


def bootstrap_reps(requested: int, cells: int, fewest: int = MIN_BOOTSTRAP) -> int:
    """Replicates actually used: as asked, unless that would exceed MAX_BOOTSTRAP_CELLS."""
    if requested * cells <= MAX_BOOTSTRAP_CELLS:
        return requested
    return max(fewest, MAX_BOOTSTRAP_CELLS // cells)


def two_sample_draws(
    rngs: tuple[np.random.Generator, np.random.Generator],
    px: FloatArray,
    nx: int,
    py: FloatArray,
    ny: int,
    reps: int,
) -> Iterator[tuple[int, IntArray, IntArray]]:
    """Independent multinomial resamples of (nx, px) and (ny, py): (first row, x, y) chunks.

    Chunked over replicates so memory stays bounded for large tables; no loop over shots or
    outcomes. Each side has its own random stream, so the two sides can be drawn in two
    threads (numpy releases the GIL while sampling) and the numbers do not depend on
    whether they were.
    """
    step = _rows_per_chunk(px.size)
    threaded = reps * px.size >= _THREAD_CELLS
    with ThreadPoolExecutor(max_workers=2) if threaded else nullcontext() as pool:
        for start in range(0, reps, step):
            rows = min(reps, start + step) - start
            if pool is not None:
                fx = pool.submit(rngs[0].multinomial, nx, px, size=rows)
                fy = pool.submit(rngs[1].multinomial, ny, py, size=rows)
                yield start, fx.result(), fy.result()
            else:
                rx = rngs[0].multinomial(nx, px, size=rows)
                yield start, rx, rngs[1].multinomial(ny, py, size=rows)


def one_sample_draws(
    rng: np.random.Generator, p: FloatArray, shots: int, reps: int
) -> Iterator[tuple[int, IntArray]]:
    """Multinomial resamples of (shots, p) in chunks: (first row, counts)."""
    step = _rows_per_chunk(p.size)
    for start in range(0, reps, step):
        yield start, rng.multinomial(shots, p, size=min(reps, start + step) - start)


def resampled_tvd_two(
    rngs: tuple[np.random.Generator, np.random.Generator],
    px: FloatArray,
    nx: int,
    py: FloatArray,
    ny: int,
    reps: int,
) -> FloatArray:
    """TVD between independent multinomial resamples of (nx, px) and (ny, py), per replicate."""
    out = np.empty(reps, dtype=np.float64)
    exact = nx * ny < 2**62
    for start, rx, ry in two_sample_draws(rngs, px, nx, py, ny, reps):
        if exact:
            # Integer arithmetic (|x·ny − y·nx|) is exact until the last division.
            diff = np.abs(rx * ny - ry * nx).sum(axis=1) / (2.0 * nx * ny)
        else:  # shot counts so large that x·ny could overflow int64
            diff = 0.5 * np.abs(rx / nx - ry / ny).sum(axis=1)
        out[start : start + diff.size] = diff
    return out


def resampled_tvd_one(
    rng: np.random.Generator, draw_p: FloatArray, shots: int, ref: FloatArray, reps: int
) -> FloatArray:
    """TVD between multinomial resamples of (shots, draw_p) and the fixed distribution ref.

    ``draw_p`` and ``ref`` share an index; mass of ``ref`` outside the arrays must be added by
    the caller (a resample never lands there, so it contributes a constant).
    """
    out = np.empty(reps, dtype=np.float64)
    for start, sample in one_sample_draws(rng, draw_p, shots, reps):
        out[start : start + len(sample)] = 0.5 * np.abs(sample / shots - ref).sum(axis=1)
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
