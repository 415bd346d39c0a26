"""Estimates: expectation values of observables, measured setting by setting.

- ``observable`` — :class:`Observable`, its text format, canonical text and hash;
- ``settings`` — grouping terms into measurement settings and each setting's circuit.

The numerics (shot allocation, estimators) live in :mod:`jobkeeper.stats`.
"""

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
    group_terms,
    plan_settings,
)

__all__ = [
    "GROUPINGS",
    "MeasurementPlan",
    "Observable",
    "PauliTerm",
    "Setting",
    "group_terms",
    "observable_from",
    "parse_observable",
    "plan_settings",
]
