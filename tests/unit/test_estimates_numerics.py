"""The estimator's numbers by hand, its determinism, and the readout correction against
numpy (issue 15, items 3 and 4)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats

from jobkeeper.circuit.ir import Circuit, Operation, Register
from jobkeeper.counts import CountTable
from jobkeeper.estimates import observable_from, plan_settings
from jobkeeper.estimates.document import aggregate
from jobkeeper.hashing import reference_canonical_json
from jobkeeper.stats.expectation import Z_95
from jobkeeper.stats.inputs import StatsInputError
from jobkeeper.stats.readout import QubitReadout, calibrate_readout


def plain(n: int) -> Circuit:
    ops = tuple(Operation("h", (q,)) for q in range(n))
    return Circuit(n, 0, (Register("q", n, 0),), (), ops)


def test_z_is_the_normal_quantile() -> None:
    # scipy.stats as the reference.
    assert abs(Z_95 - float(stats.norm.ppf(0.975))) < 1e-15


def test_a_setting_by_hand() -> None:
    # 2·Z0 over shots 0,0,0,1: per-shot values 2,2,2,−2; mean 1; sample variance
    # (3·1² + 3²)/3 = 4; variance of the mean 4/4 = 1 (textbook sample variance). The
    # identity 0.5 is added exactly.
    plan = plan_settings(plain(1), observable_from({"Z0": 2.0, "": 0.5}), shots=4, floor=2)
    document = aggregate(plan, {0: {"0": 3, "1": 1}})
    assert (document.value, document.standard_error) == (1.5, 1.0)
    assert document.interval == (1.5 - Z_95, 1.5 + Z_95)
    (term,) = document.terms
    # Z0 alone: mean 0.5, sample variance (3·0.5² + 1.5²)/3 = 1, so error √(1/4) = 0.5.
    assert (term.expectation, term.standard_error) == (0.5, 0.5)


def test_covariances_within_a_setting_are_carried() -> None:
    # Z0 and Z0 Z1 on shots where bit 1 is always 0: the two terms are the same ±1 value,
    # so 1·Z0 − 1·Z0Z1 is 0 on every shot: no variance at all, though each term varies.
    plan = plan_settings(plain(2), observable_from({"Z0": 1.0, "Z0 Z1": -1.0}), shots=10, floor=2)
    document = aggregate(plan, {0: {"00": 6, "01": 4}})
    assert document.value == 0.0 and document.standard_error == 0.0
    assert all(t.standard_error > 0 for t in document.terms)
    assert any("same value" in note for note in document.notes)


def test_the_document_bytes_depend_on_nothing_but_the_numbers() -> None:
    observable = observable_from({"Z0 Z1": 0.8, "X0": -0.3, "Y1": 0.25, "": -1.0})
    plan = plan_settings(plain(2), observable, shots=300)
    counts = {0: {"00": 60, "01": 35, "10": 25, "11": 30}, 1: {"00": 70, "11": 20, "10": 60}}
    shuffled = {k: dict(reversed(list(v.items()))) for k, v in reversed(list(counts.items()))}
    rows = {
        k: CountTable(
            np.frombuffer("".join(v).encode(), dtype=np.uint8).reshape(len(v), 2),
            np.array(list(v.values())),
        )
        for k, v in counts.items()
    }
    documents = [aggregate(plan, c) for c in (counts, shuffled, rows)]  # type: ignore[arg-type]
    first = documents[0].canonical_json()
    assert all(d.canonical_json() == first for d in documents)
    # RFC 8785 bytes, as the reference implementation writes them.
    assert first == reference_canonical_json(json.loads(first))
    parsed = json.loads(first)
    assert parsed["format"] == "jobkeeper-estimate/1"
    assert [t["label"] for t in parsed["terms"]] == ["X0", "Z0 Z1", "Y1"]
    assert parsed["settings"][0]["shots"] + parsed["settings"][1]["shots"] == 300
    assert documents[0].digest().startswith("sha256:")


def test_outcomes_must_match_the_plan() -> None:
    plan = plan_settings(plain(2), observable_from({"Z0 Z1": 1.0}), shots=100)
    with pytest.raises(StatsInputError, match="2-bit"):
        aggregate(plan, {0: {"0": 100}})
    with pytest.raises(StatsInputError, match="at least 2 shots"):
        aggregate(plan, {0: {"01": 1}})


def noisy_matrix(e0: float, e1: float) -> np.ndarray:
    return np.array([[1 - e0, e1], [e0, 1 - e1]])


def test_readout_correction_equals_inverting_the_tensored_confusion_matrix() -> None:
    # Independent path: p = (A_1 ⊗ A_2)^{-1}·p_observed with numpy, then ⟨Z0 Z1⟩ and ⟨Z1⟩.
    rng = np.random.default_rng(7)
    p_true = rng.dirichlet(np.ones(4))  # index = 2·bit1 + bit0
    readout = [QubitReadout(0, 3, 100, 8, 100), QubitReadout(1, 5, 100, 2, 100)]
    a = np.kron(*(noisy_matrix(r.e0, r.e1) for r in reversed(readout)))
    observed = a @ p_true
    plan = plan_settings(plain(2), observable_from({"Z0 Z1": 1.0, "Z1": 0.5}), shots=10**6)
    # Counts proportional to the observed distribution (exact fractions of 10^6 shots).
    shots = np.round(observed * 10**6).astype(int)
    counts = {f"{k:02b}": int(v) for k, v in enumerate(shots)}
    document = aggregate(plan, {0: counts}, calibration=readout)
    corrected = np.linalg.solve(a, shots / shots.sum())
    z0z1 = float(corrected @ np.array([1, -1, -1, 1]))
    z1 = float(corrected @ np.array([1, 1, -1, -1]))
    by_label = {t.label: t.expectation for t in document.terms}
    assert by_label["Z0 Z1"] == pytest.approx(z0z1, abs=1e-12)
    assert by_label["Z1"] == pytest.approx(z1, abs=1e-12)


def test_readout_derivatives_match_finite_differences() -> None:
    # Central differences of the closed-form factors (common practice).
    readout = QubitReadout(0, 37, 1000, 52, 1000)
    by_e0, by_e1 = readout.derivatives()
    h = 1e-6

    def factors(e0: float, e1: float) -> np.ndarray:
        return np.array([(1 - e1 + e0), (-1 - e1 + e0)]) / (1 - e0 - e1)

    e0, e1 = readout.e0, readout.e1
    assert np.allclose(by_e0, (factors(e0 + h, e1) - factors(e0 - h, e1)) / (2 * h), atol=1e-8)
    assert np.allclose(by_e1, (factors(e0, e1 + h) - factors(e0, e1 - h)) / (2 * h), atol=1e-8)
    assert np.allclose(readout.factors(), factors(e0, e1), atol=1e-15)


def test_calibration_reads_the_two_preparations() -> None:
    # Qubits (0, 2): bit 0 of a key is qubit 0, bit 1 is qubit 2.
    zeros = {"00": 90, "01": 6, "10": 4}  # qubit 0 read 1 in 6, qubit 2 in 4 of 100
    ones = {"11": 85, "10": 10, "01": 5}  # qubit 0 read 0 in 10, qubit 2 in 5 of 100
    q0, q2 = calibrate_readout((0, 2), zeros, ones)
    assert (q0.e0, q0.e1, q2.e0, q2.e1) == (0.06, 0.10, 0.04, 0.05)
    assert q0.variances() == (0.06 * 0.94 / 100, 0.10 * 0.90 / 100)  # binomial (textbook)
    with pytest.raises(StatsInputError, match="no better than a coin"):
        calibrate_readout((0,), {"1": 60, "0": 40}, {"0": 50, "1": 50})
    assert math.isclose(q2.contrast, 0.91)


def test_the_transform_route_agrees_with_the_term_by_term_route() -> None:
    from scipy.linalg import hadamard

    from jobkeeper.stats.expectation import read_counts, setting_moments
    from jobkeeper.stats.parity import parity_moments, signed_counts, transform

    rng = np.random.default_rng(11)
    # The fast transforms are the product with the Sylvester Hadamard matrix (scipy).
    table = rng.integers(0, 50, 64)
    assert np.array_equal(signed_counts(table.astype(float)), hadamard(64) @ table)
    assert np.allclose(transform(table.astype(float)), hadamard(64) @ table)
    counts = {f"{k:06b}": int(v) for k, v in enumerate(table) if v}
    outcomes = read_counts(counts, 6, "test")
    coefficients = list(rng.normal(size=9))
    bits = [sorted(rng.choice(6, size=int(rng.integers(1, 7)), replace=False)) for _ in range(9)]
    bits = [list(b) for b in {tuple(b) for b in bits}]
    coefficients = coefficients[: len(bits)]
    masks = [sum(1 << j for j in b) for b in bits]
    fast = parity_moments(outcomes, coefficients, masks)
    slow = setting_moments(outcomes, coefficients, bits)
    assert fast.value.mean == pytest.approx(slow.value.mean, abs=1e-12)
    assert fast.value.variance == pytest.approx(slow.value.variance, rel=1e-9)
    for a, b in zip(fast.terms, slow.terms, strict=True):
        assert a.mean == pytest.approx(b.mean, abs=1e-12)
        assert a.variance == pytest.approx(b.variance, rel=1e-9)
