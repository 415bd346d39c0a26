"""Outcome probabilities, seeded sampling and bit strings of counts.

Sampling method (documented so that counts can be reproduced): the generator is
``numpy.random.Generator(numpy.random.PCG64(seed))``. When the circuit has one classical
record before its final measurements (no mid-circuit measurement changes a bit), the
shots are one ``multinomial(shots, p)`` draw over the final outcome probabilities ``p``,
indexed in ascending order of the outcome index (bit j of the index = the final
measurement into the j-th smallest classical bit written by a final measurement). With
several records (mid-circuit measurements), first one ``multinomial`` over the records in
ascending order of their bits as an integer (clbit c = bit c), then, for each record in
that order with shots, one ``multinomial`` over its final outcomes as above. Each draw's
probabilities are normalised and rounded to 13 decimal places first. The same seed and
numpy version give the same counts anywhere.

Counts come back as a dict, or, past TABLE_FROM distinct outcomes, as a
:class:`~jobkeeper.counts.CountTable`: the same mapping, kept as arrays.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import numpy.typing as npt

from jobkeeper.backends.sim.kernels import State
from jobkeeper.circuit.ir import Register
from jobkeeper.counts import KEY_SEPARATOR, CountTable, Rows, key_columns, strings_of_rows

Floats = npt.NDArray[np.float64]
Ints = npt.NDArray[np.int64]

#: probabilities are rounded to this many decimal places before sampling: rounding noise
#: in the last bits (which differs between BLAS builds, kernels and simulators) must not
#: change counts; near p = 1/2 it would, since numpy's binomial branches on p < 1/2.
SAMPLING_DECIMALS = 13
#: exact probabilities below this are floating-point residue of amplitudes that cancel
#: (a sum of 2^20 of them stays below 1e-9); they are left out of exact results.
NOISE_FLOOR = 1e-15
#: up to this many outcomes are formatted one by one in Python, more with numpy at once.
SMALL_FORMAT = 32
#: more distinct outcomes than this come as a CountTable (arrays) rather than a dict: a
#: dict of half a million bit strings took 2.5 times as long to build as the draw itself.
TABLE_FROM = 4096


def marginal(state: State, n: int, qubits: Sequence[int]) -> Floats:
    """Probabilities of the readings of ``qubits``: index bit j = reading of qubits[j]."""
    if len(qubits) == n and all(q == j for j, q in enumerate(qubits)):
        # Every qubit read, in index order: the probabilities are the state's, as they are.
        return np.asarray(state.real**2 + state.imag**2, dtype=np.float64)
    floats = state.view(np.float64).reshape(-1, 2)
    return reading_axes(np.einsum("ij,ij->i", floats, floats), n, qubits).reshape(-1)


def reading_axes(populations: Floats, n: int, qubits: Sequence[int]) -> Floats:
    """The basis probabilities of n qubits summed to those of the readings of
    ``qubits``, as an array with one axis per reading: axis a is the reading of
    ``qubits[m − 1 − a]`` (m readings), so the flat array's index bit j is qubits[j]."""
    probs = populations.reshape((2,) * n)
    keep = [n - 1 - q for q in qubits]
    dropped = tuple(a for a in range(n) if a not in keep)
    summed = np.sum(probs, axis=dropped) if dropped else probs
    # Remaining axes are in ascending axis order; the last one must be qubits[0].
    remaining = sorted(keep)
    order = [remaining.index(keep[j]) for j in reversed(range(len(keep)))]
    return np.ascontiguousarray(np.transpose(summed, order))


def draw(rng: np.random.Generator, shots: int, probs: Floats) -> Ints:
    """One multinomial draw of ``shots`` over ``probs``, normalised and rounded to
    SAMPLING_DECIMALS places first."""
    total = float(probs.sum())
    if shots == 0 or total <= 0:
        return np.zeros(len(probs), dtype=np.int64)
    rounded = np.round(probs / total, SAMPLING_DECIMALS)
    return rng.multinomial(shots, rounded / rounded.sum()).astype(np.int64, copy=False)


#: row b: the ASCII digits of byte b, most significant bit first.
_BYTE_DIGITS = np.array(
    [[48 + ((b >> (7 - i)) & 1) for i in range(8)] for b in range(256)], dtype=np.uint8
)


_SEPARATOR = ord(KEY_SEPARATOR)


class BitFormatter:
    """Turns outcome indices into count keys, vectorised.

    An outcome index has bit j = the final measurement into the j-th smallest of
    ``final_clbits``; the other classical bits come from the record (an int, clbit c =
    bit c). The columns are laid out by :func:`jobkeeper.counts.key_columns`, the one rule
    of count keys.
    """

    def __init__(self, cregs: Sequence[Register], num_clbits: int, final_clbits: Sequence[int]):
        final = set(final_clbits)
        self._num_final = len(final)
        # display column → clbit (-1 for the separator), as every count key is laid out
        self._clbits: list[int] = key_columns(cregs)
        # Final bit j of an outcome index is the j-th smallest final clbit: its digit,
        # the index written most significant bit first, is num_final - 1 - j. Columns
        # whose digits follow one another are copied as one run (within a register the
        # digits descend with the clbits, so a register's final bits are one run).
        rank = {clbit: j for j, clbit in enumerate(sorted(final))}
        self._runs: list[tuple[int, int, int]] = []  # (first column, first digit, length)
        for column, clbit in enumerate(self._clbits):
            if clbit in final:
                digit = self._num_final - 1 - rank[clbit]
                last = self._runs[-1] if self._runs else None
                if last is not None and last[0] + last[2] == column and last[1] + last[2] == digit:
                    self._runs[-1] = (last[0], last[1], last[2] + 1)
                else:
                    self._runs.append((column, digit, 1))
        self._fixed = [i for i, c in enumerate(self._clbits) if c not in final]
        # column → bit of the outcome index shown there (the runs, digit 0 leftmost).
        self._digit_of = {
            column + i: self._num_final - 1 - (first + i)
            for column, first, length in self._runs
            for i in range(length)
        }

    @property
    def width(self) -> int:
        """Characters in a count key (bits and the separators between registers)."""
        return len(self._clbits)

    def format(self, record: int, outcomes: Ints) -> list[str]:
        """Bit strings of ``outcomes`` (indices over the final measurements)."""
        count, width = len(outcomes), len(self._clbits)
        if width == 0:
            return [""] * count
        if count <= SMALL_FORMAT:
            return [self._one(record, outcome) for outcome in outcomes.tolist()]
        # One decode and one split make the strings (per-outcome Python formatting would
        # cost more than the draw itself).
        return strings_of_rows(self.rows(record, outcomes))

    def rows(self, record: int, outcomes: Ints) -> Rows:
        """The bit strings of ``outcomes`` as rows of ASCII bytes, vectorised."""
        count, width = len(outcomes), len(self._clbits)
        chars = np.empty((count, width), dtype=np.uint8)
        if self._num_final:
            nbytes = (self._num_final + 7) // 8
            big_endian = outcomes.astype(">u8").view(np.uint8).reshape(count, 8)[:, 8 - nbytes :]
            digits = _BYTE_DIGITS[big_endian].reshape(count, 8 * nbytes)
            digits = digits[:, 8 * nbytes - self._num_final :]
            for column, first, length in self._runs:
                chars[:, column : column + length] = digits[:, first : first + length]
        for column in self._fixed:
            clbit = self._clbits[column]
            chars[:, column] = _SEPARATOR if clbit < 0 else 48 + ((record >> clbit) & 1)
        return chars

    def _one(self, record: int, outcome: int) -> str:
        # Column by column in Python: for a handful of outcomes the dozen numpy calls of
        # the vectorised path cost more (measured: a third of sampling a 2-qubit job).
        chars = []
        for column, clbit in enumerate(self._clbits):
            if clbit < 0:
                chars.append(KEY_SEPARATOR)
            elif column in self._digit_of:
                chars.append("1" if (outcome >> self._digit_of[column]) & 1 else "0")
            else:
                chars.append("1" if (record >> clbit) & 1 else "0")
        return "".join(chars)


def sample_counts(
    rng: np.random.Generator,
    shots: int,
    records: Sequence[tuple[int, Floats]],
    formatter: BitFormatter,
) -> Mapping[str, int]:
    """Counts of ``shots`` drawn as the module docstring says, from ``records`` (sorted
    by record; each with its weighted final-outcome probabilities): a dict, or a
    :class:`~jobkeeper.counts.CountTable` when there are more than TABLE_FROM distinct
    outcomes."""
    draws: list[tuple[int, Ints]] = []
    if len(records) == 1:
        record, probs = records[0]
        draws.append((record, draw(rng, shots, probs)))
    else:
        weights = np.array([float(p.sum()) for _, p in records])
        per_record = draw(rng, shots, weights)
        for (record, probs), record_shots in zip(records, per_record.tolist(), strict=True):
            if record_shots:
                draws.append((record, draw(rng, record_shots, probs)))
    return counts_of_draws(formatter, draws)


def counts_of_draws(
    formatter: BitFormatter, draws: Sequence[tuple[int, Ints]]
) -> Mapping[str, int]:
    """The counts of ``draws`` (record, shots per final outcome): a dict, or a
    :class:`~jobkeeper.counts.CountTable` when there are more than TABLE_FROM distinct
    outcomes."""
    hits = [(record, drawn, np.flatnonzero(drawn)) for record, drawn in draws]
    if sum(len(hit) for _, _, hit in hits) > TABLE_FROM and formatter.width:
        return CountTable.from_parts(
            [(formatter.rows(record, hit), drawn[hit]) for record, drawn, hit in hits]
        )
    counts: dict[str, int] = {}
    for record, drawn, hit in hits:
        keys, values = formatter.format(record, hit), drawn[hit].tolist()
        if not counts:
            counts.update(zip(keys, values, strict=True))
            continue
        for key, value in zip(keys, values, strict=True):
            counts[key] = counts.get(key, 0) + value
    return counts


def probabilities_of(
    formatter: BitFormatter, record: int, probs: Floats, into: dict[str, float]
) -> None:
    """Add the exact probabilities above the noise floor to ``into``."""
    hit = np.nonzero(probs > NOISE_FLOOR)[0]
    for key, value in zip(formatter.format(record, hit), probs[hit].tolist(), strict=True):
        into[key] = into.get(key, 0.0) + value
