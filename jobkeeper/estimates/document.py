"""From the settings' outcomes to the estimate document, rendered to the same bytes on
every machine.

:func:`aggregate` combines the settings of a :class:`MeasurementPlan`: each setting's
mean and variance of the mean (:mod:`jobkeeper.stats.expectation`), settings added as
independent samples, the identity term added exactly; with readout mitigation each
setting's per-shot values are corrected and the variance gains the calibration's share
by the delta method (:mod:`jobkeeper.stats.readout`). Sums over settings and qubits are
:func:`math.fsum`, so their order does not matter.

:meth:`EstimateDocument.canonical_json` is RFC 8785 JSON (:mod:`jobkeeper.hashing`):
numbers in the standard's one shortest form, keys sorted, lists in a fixed order
(settings by index, terms in the observable's canonical order, calibration by qubit).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, cast

from jobkeeper.estimates.settings import MeasurementPlan, Setting
from jobkeeper.exceptions import ConfigError
from jobkeeper.hashing import canonical_json, sha256_tag
from jobkeeper.stats.allocation import RULE as ALLOCATION_RULE
from jobkeeper.stats.expectation import (
    Z_95,
    Outcomes,
    SettingMoments,
    normal_interval,
    read_counts,
    read_probabilities,
    setting_moments,
)
from jobkeeper.stats.parity import fits, parity_moments
from jobkeeper.stats.readout import WEAK_READOUT, QubitReadout

#: The document's own format tag: a change of what it holds or how it is computed is a
#: new tag, so a verifier knows which rules re-derive it.
FORMAT = "jobkeeper-estimate/1"
CONFIDENCE = 0.95


@dataclass(frozen=True)
class TermEstimate:
    """One term: its expectation ⟨P⟩ (without the coefficient) and that one's error."""

    label: str
    coefficient: float
    setting: int
    expectation: float
    standard_error: float


@dataclass(frozen=True)
class SettingEstimate:
    """One setting's share: its value (Σ c_i·⟨P_i⟩ over its terms) and standard error
    (with mitigation, including the calibration's share; that share is common to all
    settings, so their errors do not add in quadrature to the total's)."""

    index: int
    basis: str
    terms: tuple[str, ...]
    weight: float
    shots: int | None
    value: float
    standard_error: float


@dataclass(frozen=True)
class EstimateDocument:
    """An estimate of ⟨H⟩: value, standard error, 95% interval, per setting and per term,
    and how it was computed."""

    value: float
    standard_error: float
    interval: tuple[float, float]
    method: Mapping[str, Any]
    observable_text: str
    observable_hash: str
    identity: float
    shots: int | None
    settings: tuple[SettingEstimate, ...]
    terms: tuple[TermEstimate, ...]
    calibration: tuple[QubitReadout, ...] | None
    notes: tuple[str, ...]

    def to_json(self) -> dict[str, Any]:
        """The document as JSON-ready values (snake_case keys)."""
        return {
            "format": FORMAT,
            "value": self.value,
            "standard_error": self.standard_error,
            "interval": list(self.interval),
            "confidence": CONFIDENCE,
            "method": dict(self.method),
            "observable": {
                "text": self.observable_text,
                "hash": self.observable_hash,
                "identity": self.identity,
            },
            "shots": self.shots,
            "settings": [
                {
                    "index": s.index,
                    "basis": s.basis,
                    "terms": list(s.terms),
                    "weight": s.weight,
                    "shots": s.shots,
                    "value": s.value,
                    "standard_error": s.standard_error,
                }
                for s in self.settings
            ],
            "terms": [
                {
                    "label": t.label,
                    "coefficient": t.coefficient,
                    "setting": t.setting,
                    "expectation": t.expectation,
                    "standard_error": t.standard_error,
                }
                for t in self.terms
            ],
            "calibration": (
                None if self.calibration is None else [r.to_json() for r in self.calibration]
            ),
            "notes": list(self.notes),
        }

    def canonical_json(self) -> bytes:
        """RFC 8785 bytes: what a verifier re-derives and compares."""
        return canonical_json(self.to_json())

    def digest(self) -> str:
        return sha256_tag(self.canonical_json())


def aggregate(
    plan: MeasurementPlan,
    outcomes: Mapping[int, Mapping[str, float]],
    *,
    calibration: Sequence[QubitReadout] | None = None,
) -> EstimateDocument:
    """The estimate from each setting's counts (``plan.shots`` given) or exact
    probabilities (``plan.shots`` None), keyed by setting index. ``calibration``
    (:func:`jobkeeper.stats.readout.calibrate_readout`) corrects the readout."""
    exact = plan.shots is None
    if set(outcomes) != {s.index for s in plan.settings}:
        raise ConfigError(
            f"outcomes are given for settings {sorted(outcomes)}, the plan has "
            f"{[s.index for s in plan.settings]}"
        )
    if exact and calibration is not None:
        raise ConfigError("an exact estimate has no readout to correct: drop the calibration")
    readouts = _readouts(plan, calibration)
    parameters = [(r, which) for r in readouts or () for which in (0, 1)]
    notes = list(plan.notes)
    settings, terms = [], []
    term_entries: dict[int, TermEstimate] = {}
    value_gradient: list[list[float]] = [[] for _ in parameters]
    variances = []
    for setting in plan.settings:
        what = f"setting {setting.index} ({setting.label})"
        data = outcomes[setting.index]
        width = len(setting.qubits)
        read = (
            read_probabilities(data, width, what)
            if exact
            else read_counts(cast(Mapping[str, int], data), width, what)
        )
        moments = _moments(plan, setting, read, readouts, parameters)
        notes.extend(_setting_notes(setting, read, moments, what))
        for p, slope in enumerate(moments.value.gradient):
            value_gradient[p].append(slope)
        variances.append(moments.value.variance)
        settings.append(
            SettingEstimate(
                setting.index,
                setting.label,
                tuple(plan.observable.labels[i] for i in setting.terms),
                setting.weight,
                read.shots,
                moments.value.mean,
                math.sqrt(
                    moments.value.variance
                    + _calibration_variance(parameters, moments.value.gradient)
                ),
            )
        )
        for i, term_moments in zip(setting.terms, moments.terms, strict=True):
            term = plan.observable.terms[i]
            share = _calibration_variance(parameters, term_moments.gradient)
            term_entries[i] = TermEstimate(
                plan.observable.labels[i],
                term.coefficient,
                setting.index,
                term_moments.mean,
                math.sqrt(term_moments.variance + share),
            )
    terms = [term_entries[i] for i in sorted(term_entries)]
    calibration_share = _calibration_variance(parameters, [math.fsum(g) for g in value_gradient])
    variance = math.fsum(variances) + calibration_share
    value = math.fsum([plan.observable.identity, *(s.value for s in settings)])
    standard_error = math.sqrt(variance)
    notes.extend(_notes(plan, readouts, exact))
    return EstimateDocument(
        value=value,
        standard_error=standard_error,
        interval=(value, value) if exact else normal_interval(value, standard_error),
        method=_method(plan, readouts is not None),
        observable_text=plan.observable.canonical_text(),
        observable_hash=plan.observable.hash(),
        identity=plan.observable.identity,
        shots=None if exact else sum(s.shots or 0 for s in settings),
        settings=tuple(settings),
        terms=tuple(terms),
        calibration=readouts,
        notes=tuple(notes),
    )


def _readouts(
    plan: MeasurementPlan, calibration: Sequence[QubitReadout] | None
) -> tuple[QubitReadout, ...] | None:
    if calibration is None:
        return None
    by_qubit = {r.qubit: r for r in calibration}
    missing = sorted({q for s in plan.settings for q in s.qubits} - set(by_qubit))
    if missing:
        raise ConfigError(f"the readout calibration lacks qubits {missing}")
    return tuple(by_qubit[q] for q in sorted(by_qubit))


def _moments(
    plan: MeasurementPlan,
    setting: Setting,
    read: Outcomes,
    readouts: tuple[QubitReadout, ...] | None,
    parameters: Sequence[tuple[QubitReadout, int]],
) -> SettingMoments:
    bit_of = {q: j for j, q in enumerate(setting.qubits)}
    coefficients = [plan.observable.terms[i].coefficient for i in setting.terms]
    term_bits = [[bit_of[q] for q in plan.observable.terms[i].qubits] for i in setting.terms]
    if readouts is None:
        if fits(len(setting.qubits)):
            masks = [sum(1 << j for j in bits) for bits in term_bits]
            return parity_moments(read, coefficients, masks)
        return setting_moments(read, coefficients, term_bits)
    by_qubit = {r.qubit: r for r in readouts}
    factors = [by_qubit[q].factors() for q in setting.qubits]
    derivatives = [
        {bit_of[r.qubit]: r.derivatives()[which]} if r.qubit in bit_of else {}
        for r, which in parameters
    ]
    return setting_moments(read, coefficients, term_bits, factors, derivatives)


def _calibration_variance(
    parameters: Sequence[tuple[QubitReadout, int]], gradient: Sequence[float]
) -> float:
    return math.fsum(
        slope * slope * readout.variances()[which]
        for (readout, which), slope in zip(parameters, gradient, strict=True)
    )


def _setting_notes(
    setting: Setting, read: Outcomes, moments: SettingMoments, what: str
) -> list[str]:
    if read.shots is None:
        return []
    notes = []
    if setting.shots is not None and read.shots != setting.shots:
        notes.append(f"{what} ran {read.shots} shots, {setting.shots} were planned")
    if moments.value.variance == 0.0:
        notes.append(
            f"{what}: all {read.shots} shots gave the same value; its standard error of 0 "
            "may understate the uncertainty"
        )
    return notes


def _notes(
    plan: MeasurementPlan, readouts: tuple[QubitReadout, ...] | None, exact: bool
) -> list[str]:
    if exact:
        return ["exact: computed from exact distributions, with no sampling error"]
    notes = [
        f"sampled: the 95% interval is a normal approximation from {plan.shots} shots over "
        f"{len(plan.settings)} setting{'s' if len(plan.settings) != 1 else ''}; it is "
        "trustworthy only when every setting has many shots"
    ]
    if readouts is not None:
        notes.append(
            "readout corrected with per-qubit confusion matrices (tensored model); the "
            "standard error includes the calibration's own sampling error (delta method)"
        )
        weak = [r.qubit for r in readouts if r.contrast < WEAK_READOUT]
        if weak:
            notes.append(
                f"qubits {weak} read so poorly (1 − e0 − e1 < {WEAK_READOUT}) that the "
                "correction multiplies their noise many times"
            )
    return notes


def _method(plan: MeasurementPlan, mitigated: bool) -> dict[str, Any]:
    return {
        "estimator": "exact" if plan.shots is None else "sampled-mean",
        "grouping": plan.grouping,
        "allocation": None
        if plan.shots is None
        else {"rule": ALLOCATION_RULE, "floor": plan.floor},
        "interval": {"kind": "normal", "z": Z_95},
        "mitigation": "readout-tensored" if mitigated else "none",
    }
