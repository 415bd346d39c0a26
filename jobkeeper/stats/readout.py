"""Readout mitigation numerics: per-qubit confusion matrices and the tensored correction.

Model (the tensor-product noise model of Bravyi, Sheldon, Kandala, McKay, Gambetta,
"Mitigating measurement errors in multiqubit experiments", Phys. Rev. A 103, 042605
(2021)): each qubit's readout flips independently, a 0 read as 1 with probability e0
and a 1 read as 0 with probability e1, so the observed distribution is
(A_1 ⊗ … ⊗ A_n)·p with A = [[1 − e0, e1], [e0, 1 − e1]] (columns: prepared 0, 1).

Calibration (two circuits, the preparations documented here): every measured qubit
prepared in 0 (nothing applied) and every one prepared in 1 (an ``x`` on each), each
then measured; e0 of a qubit is the fraction of the first circuit's shots in which it
read 1, e1 the fraction of the second's in which it read 0. (Two circuits calibrate the
tensored model; from memory, this is how the paper calibrates it.)

Correction. Because A is column-stochastic, the inverse model maps a Z product's per-bit
values (+1, −1) to g = A^{-T}(+1, −1): for a bit read as b,

    g(b) = (z(b) − (e1 − e0)) / (1 − e0 − e1),    z(0) = +1, z(1) = −1,

(solve Aᵀg = z; e.g. ⟨Z⟩_observed = (1 − e0 − e1)⟨Z⟩ + (e1 − e0)), and a Z product's
corrected per-shot value is the product of its bits' g — an unbiased estimate of the
product's noiseless expectation given e0 and e1, whose sample variance the estimator
uses as usual.

Calibration error by the delta method: e0 and e1 are binomial proportions with variance
e(1 − e)/N (textbook), independent between the two circuits and, under the tensored
model, between qubits; the estimate's variance gains Σ (∂value/∂e)²·var(e) over every
qubit's e0 and e1. The derivatives of g are closed forms (below); all arithmetic is
plain IEEE-754 in a fixed order, so the result is the same on every machine.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from jobkeeper.stats.expectation import outcome_rows
from jobkeeper.stats.inputs import StatsInputError

#: Below this 1 − e0 − e1 the correction multiplies noise by more than 10 per bit.
WEAK_READOUT = 0.1


@dataclass(frozen=True)
class QubitReadout:
    """One qubit's calibration: how often it read wrong, and out of how many shots."""

    qubit: int
    flips_from_zero: int
    shots_zero: int
    flips_from_one: int
    shots_one: int

    @property
    def e0(self) -> float:
        """P(read 1 | prepared 0)."""
        return self.flips_from_zero / self.shots_zero

    @property
    def e1(self) -> float:
        """P(read 0 | prepared 1)."""
        return self.flips_from_one / self.shots_one

    @property
    def contrast(self) -> float:
        """1 − e0 − e1: the determinant of the qubit's confusion matrix."""
        return 1.0 - self.e0 - self.e1

    def factors(self) -> tuple[float, float]:
        """The corrected per-shot values g(0), g(1) of this bit in a Z product."""
        e0, e1, d = self.e0, self.e1, self.contrast
        return ((1.0 - e1) + e0) / d, ((-1.0 - e1) + e0) / d

    def derivatives(self) -> tuple[tuple[float, float], tuple[float, float]]:
        """(∂g(0)/∂e0, ∂g(1)/∂e0), (∂g(0)/∂e1, ∂g(1)/∂e1)."""
        e0, e1, d = self.e0, self.e1, self.contrast
        squared = d * d
        by_e0 = ((2.0 - 2.0 * e1) / squared, (-2.0 * e1) / squared)
        by_e1 = ((2.0 * e0) / squared, (-2.0 + 2.0 * e0) / squared)
        return by_e0, by_e1

    def variances(self) -> tuple[float, float]:
        """The binomial variances of e0 and e1."""
        e0, e1 = self.e0, self.e1
        return e0 * (1.0 - e0) / self.shots_zero, e1 * (1.0 - e1) / self.shots_one

    def to_json(self) -> dict[str, object]:
        return {
            "qubit": self.qubit,
            "flips_from_zero": self.flips_from_zero,
            "shots_zero": self.shots_zero,
            "flips_from_one": self.flips_from_one,
            "shots_one": self.shots_one,
            "e0": self.e0,
            "e1": self.e1,
        }


def calibrate_readout(
    qubits: Sequence[int], zeros: Mapping[str, int], ones: Mapping[str, int]
) -> tuple[QubitReadout, ...]:
    """Per-qubit readout from the two calibration circuits' counts (qubit ``qubits[j]``
    is bit j of their keys from the right). Raises StatsInputError for a qubit whose
    readout is no better than a coin (1 − e0 − e1 ≤ 0): nothing can be corrected."""
    width = len(qubits)
    read: list[tuple[np.ndarray, int]] = []
    for counts, what in ((zeros, "all-zeros calibration"), (ones, "all-ones calibration")):
        rows, values = outcome_rows(counts, width, what)
        shots = int(values.sum())
        if shots < 1:
            raise StatsInputError(f"{what}: no shots")
        # Integer sums: exact everywhere.
        ones_read = ((rows[:, ::-1] == ord("1")).astype(np.int64) * values[:, None]).sum(axis=0)
        read.append((ones_read, shots))
    (zeros_ones, shots_zero), (ones_ones, shots_one) = read
    out = []
    for j, qubit in enumerate(qubits):
        readout = QubitReadout(
            qubit, int(zeros_ones[j]), shots_zero, shots_one - int(ones_ones[j]), shots_one
        )
        if readout.contrast <= 0:
            raise StatsInputError(
                f"qubit {qubit} reads no better than a coin (e0 = {readout.e0:.3g}, "
                f"e1 = {readout.e1:.3g}): its readout cannot be corrected"
            )
        out.append(readout)
    return tuple(out)
