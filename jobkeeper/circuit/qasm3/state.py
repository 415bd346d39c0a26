"""What the parts of the interpreter share: a classical variable, and the interpreter's
state as the statement handlers in other modules see it (a Protocol, so that those
modules need not import the interpreter)."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import NoReturn, Protocol

from jobkeeper.circuit.ir import Operation, Register
from jobkeeper.circuit.lexer import Token
from jobkeeper.circuit.qasm3 import nodes as n
from jobkeeper.circuit.qasm3.modifiers import Gate
from jobkeeper.circuit.qasm3.values import Evaluator, Value


@dataclass(slots=True)
class Var:
    type: str
    width: int | None
    value: Value
    const: bool
    input: bool = False


class State(Protocol):
    file: str | None
    bindings: Mapping[str, float]
    qregs: dict[str, tuple[Register, bool]]
    cregs: dict[str, tuple[Register, bool]]
    num_qubits: int
    num_clbits: int
    scopes: list[dict[str, Var]]
    gates: dict[str, n.GateDef]
    ops: list[Operation]
    condition: tuple[Register, frozenset[int]] | None
    runtime_bits: dict[str, int] | None
    evaluator: Evaluator

    def fail(self, message: str, tok: Token) -> NoReturn: ...

    def unsupported(self, feature: str, tok: Token) -> NoReturn: ...

    def charge(self, units: int) -> None: ...

    def size(self, expr: n.Expr) -> int: ...

    def evaluate(self, expr: n.Expr) -> Value: ...

    def declare(self, tok: Token, var: Var) -> None: ...

    def global_only(self, what: str, tok: Token) -> None: ...

    def coerce(self, type_name: str, width: int | None, value: Value, tok: Token) -> Value: ...

    def block(self, body: tuple[n.Statement, ...]) -> None: ...

    def lookup_gate(self, tok: Token) -> Gate: ...
