"""Outcome probabilities, seeded sampling and bit strings of counts.

Sampling method (documented so that counts can be reproduced): the generator is
``numpy.random.Generator(numpy.random.PCG64(seed))``. When the circuit has one classical
record before its final measurements (no mid-circuit measurement changes a bit), the
shots are one ``multinomial(shots, p)`` draw over the final outcome probabilities ``p``,
indexed in ascending order of the outcome index (bit j of the index = the j-th final
measurement in circuit order). With several records (mid-circuit measurements), first one
``multinomial`` over the records in ascending order of their bits as an integer (clbit c
= bit c), then, for each record in that order with shots, one ``multinomial`` over its
final outcomes as above. The same seed and numpy version give the same counts anywhere.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import numpy.typing as npt

from jobkeeper.backends._kernels import State
from jobkeeper.circuit.ir import Register

Floats = npt.NDArray[np.float64]
Ints = npt.NDArray[np.int64]

#: exact probabilities below this are floating-point residue of amplitudes that cancel
#: (a sum of 2^20 of them stays below 1e-9); they are left out of exact results.
NOISE_FLOOR = 1e-15


def marginal(state: State, n: int, qubits: Sequence[int]) -> Floats:
    """Probabilities of the readings of ``qubits``: index bit j = reading of qubits[j]."""
    floats = state.view(np.float64).reshape(-1, 2)
    probs = np.einsum("ij,ij->i", floats, floats).reshape((2,) * n)
    keep = [n - 1 - q for q in qubits]
    summed = np.sum(probs, axis=tuple(a for a in range(n) if a not in keep)) if n else probs
    # Remaining axes are in ascending axis order; the last one must be qubits[0].
    remaining = sorted(keep)
    order = [remaining.index(keep[j]) for j in reversed(range(len(keep)))]
    return np.ascontiguousarray(np.transpose(summed, order)).reshape(-1)


def draw(rng: np.random.Generator, shots: int, probs: Floats) -> Ints:
    """One multinomial draw of ``shots`` over ``probs`` (renormalised against rounding)."""
    total = float(probs.sum())
    if shots == 0 or total <= 0:
        return np.zeros(len(probs), dtype=np.int64)
    return rng.multinomial(shots, probs / total).astype(np.int64)


class BitFormatter:
    """Turns outcome indices into OpenQASM 2 bit strings, vectorised.

    ``final_clbits[j]`` is the classical bit the j-th final measurement writes; the other
    bits come from the record (an int, clbit c = bit c). Within a register the highest
    index is leftmost; the last declared register is leftmost; one space between them.
    """

    def __init__(self, cregs: Sequence[Register], num_clbits: int, final_clbits: Sequence[int]):
        columns: list[int] = []
        for reg in reversed(cregs):
            if columns:
                columns.append(-1)
            columns += [reg.offset + i for i in reversed(range(reg.size))]
        self._columns = np.array(columns, dtype=np.int64)
        self._num_clbits = num_clbits
        self._final = np.array(final_clbits, dtype=np.int64)

    def format(self, record: int, outcomes: Ints) -> list[str]:
        """Bit strings of ``outcomes`` (indices over the final measurements)."""
        count = len(outcomes)
        width = len(self._columns)
        if width == 0:
            return [""] * count
        bits = np.zeros((count, max(self._num_clbits, 1)), dtype=np.uint8)
        for c in range(self._num_clbits):
            if (record >> c) & 1:
                bits[:, c] = 1
        for j, c in enumerate(self._final):
            bits[:, c] = (outcomes >> j) & 1
        chars = np.where(self._columns >= 0, bits[:, np.maximum(self._columns, 0)] + 48, 32)
        packed = np.ascontiguousarray(chars.astype(np.uint8)).view(f"S{width}").reshape(-1)
        strings: list[str] = packed.astype(f"U{width}").tolist()
        return strings

    def zeros(self) -> str:
        """The bit string of a record of all zeros."""
        return self.format(0, np.zeros(1, dtype=np.int64))[0]


def counts_of(formatter: BitFormatter, record: int, drawn: Ints, into: dict[str, int]) -> None:
    """Add the non-zero entries of a draw to ``into``, formatting only those."""
    hit = np.nonzero(drawn)[0]
    for key, value in zip(formatter.format(record, hit), drawn[hit].tolist(), strict=True):
        into[key] = into.get(key, 0) + value


def probabilities_of(
    formatter: BitFormatter, record: int, probs: Floats, into: dict[str, float]
) -> None:
    """Add the exact probabilities above the noise floor to ``into``."""
    hit = np.nonzero(probs > NOISE_FLOOR)[0]
    for key, value in zip(formatter.format(record, hit), probs[hit].tolist(), strict=True):
        into[key] = into.get(key, 0.0) + value
