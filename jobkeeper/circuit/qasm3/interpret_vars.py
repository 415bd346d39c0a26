"""A classical variable of a running program."""

from __future__ import annotations

from dataclasses import dataclass

from jobkeeper.circuit.qasm3.values import Value


@dataclass(slots=True)
class Var:
    type: str
    width: int | None
    value: Value
    const: bool
    input: bool = False
