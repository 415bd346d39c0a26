"""Estimates: expectation values of observables, measured setting by setting.

- ``observable`` — :class:`Observable`, its text format, canonical text and hash;
- ``settings`` — grouping terms into measurement settings, each setting's circuit, and
  the readout calibration circuits;
- ``document`` — :func:`aggregate`: from the settings' outcomes to the
  :class:`EstimateDocument` (value, standard error, interval, per setting and per term),
  rendered to the same bytes on every machine.

The numerics (shot allocation, estimators, readout correction) live in
:mod:`jobkeeper.stats`. In Python::

    observable = parse_observable(text, source_name="h2.obs")
    plan = plan_settings(circuit, observable, shots=20_000)   # shots=None: exact
    counts = {s.index: run(s.circuit, s.shots) for s in plan.settings}
    document = aggregate(plan, counts)                        # .value, .standard_error
"""

from jobkeeper.estimates.document import EstimateDocument, SettingEstimate, TermEstimate, aggregate
from jobkeeper.estimates.observable import (
    Observable,
    PauliTerm,
    observable_from,
    parse_observable,
)
from jobkeeper.estimates.settings import (
    GROUPINGS,
    MeasurementPlan,
    Setting,
    calibration_circuits,
    group_terms,
    plan_settings,
)

__all__ = [
    "GROUPINGS",
    "EstimateDocument",
    "MeasurementPlan",
    "Observable",
    "PauliTerm",
    "Setting",
    "SettingEstimate",
    "TermEstimate",
    "aggregate",
    "calibration_circuits",
    "group_terms",
    "observable_from",
    "parse_observable",
    "plan_settings",
]
