"""Inputs and sweeps: values for a program's ``input`` parameters from text
(:mod:`.bindings`), and the ordered points of a sweep (:mod:`.plan`). Pure: nothing here
parses a program, runs a circuit or touches a store."""

from jobkeeper.sweeps.bindings import Bindings, Value, bind_settings, parse_settings, parse_value
from jobkeeper.sweeps.plan import (
    MAX_POINTS,
    Axis,
    PointsTable,
    Sweep,
    parse_axis,
    parse_points,
    plan_sweep,
    read_points,
)

__all__ = [
    "MAX_POINTS",
    "Axis",
    "Bindings",
    "PointsTable",
    "Sweep",
    "Value",
    "bind_settings",
    "parse_axis",
    "parse_points",
    "parse_settings",
    "parse_value",
    "plan_sweep",
    "read_points",
]
