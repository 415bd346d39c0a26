"""The syntax tree of the OpenQASM 3 subset: what :mod:`.syntax` builds from tokens and
:mod:`.interpret` runs. A :class:`~jobkeeper.circuit.qasm3.template.Template` keeps one
tree and runs it once per binding, so a program is parsed once however often it is bound.

Every node keeps the token it starts at, for messages that name the line and column.
"""

from __future__ import annotations

from dataclasses import dataclass

from jobkeeper.circuit.lexer import Token

# ---- expressions -------------------------------------------------------------------------


class Expr:
    __slots__ = ("tok",)

    def __init__(self, tok: Token) -> None:
        self.tok = tok


class Lit(Expr):
    """A literal: int, float, bool, or a bit string as ``(value, width)``."""

    __slots__ = ("value",)

    def __init__(self, tok: Token, value: object) -> None:
        super().__init__(tok)
        self.value = value


class Name(Expr):
    __slots__ = ()


class Unary(Expr):
    __slots__ = ("op", "operand")

    def __init__(self, tok: Token, op: str, operand: Expr) -> None:
        super().__init__(tok)
        self.op = op
        self.operand = operand


class Chain(Expr):
    """``first op1 x1 op2 x2 ...`` at one precedence level, kept flat (left to right) so
    that a long sum never makes a deep tree."""

    __slots__ = ("first", "rest")

    def __init__(self, tok: Token, first: Expr, rest: list[tuple[Token, Expr]]) -> None:
        super().__init__(tok)
        self.first = first
        self.rest = rest


class Power(Expr):
    __slots__ = ("base", "exponent")

    def __init__(self, tok: Token, base: Expr, exponent: Expr) -> None:
        super().__init__(tok)
        self.base = base
        self.exponent = exponent


class Call(Expr):
    __slots__ = ("args",)

    def __init__(self, tok: Token, args: list[Expr]) -> None:
        super().__init__(tok)
        self.args = args


@dataclass(frozen=True, slots=True)
class TypeSpec:
    """``int[32]``, ``uint``, ``float[64]``, ``bool``, ``bit[4]``, ``angle``..."""

    tok: Token
    name: str
    size: Expr | None


class Cast(Expr):
    __slots__ = ("arg", "type")

    def __init__(self, tok: Token, type_: TypeSpec, arg: Expr) -> None:
        super().__init__(tok)
        self.type = type_
        self.arg = arg


@dataclass(frozen=True, slots=True)
class RangeSpec:
    """``[start:step:stop]`` (inclusive); parts may be omitted in an index."""

    tok: Token
    start: Expr | None
    step: Expr | None
    stop: Expr | None


@dataclass(frozen=True, slots=True)
class SetSpec:
    tok: Token
    items: list[Expr]


Selector = Expr | RangeSpec | SetSpec


class Index(Expr):
    __slots__ = ("base", "selector")

    def __init__(self, tok: Token, base: Expr, selector: Selector) -> None:
        super().__init__(tok)
        self.base = base
        self.selector = selector


# ---- statements --------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class Operand:
    """A qubit or bit operand: a name, possibly with one selector."""

    tok: Token
    selector: Selector | None


@dataclass(frozen=True, slots=True)
class Include:
    tok: Token
    path: str


@dataclass(frozen=True, slots=True)
class QubitDecl:
    tok: Token
    name: Token
    size: Expr | None


@dataclass(frozen=True, slots=True)
class BitDecl:
    tok: Token
    name: Token
    size: Expr | None
    init: Expr | None


@dataclass(frozen=True, slots=True)
class VarDecl:
    tok: Token
    type: TypeSpec
    name: Token
    init: Expr | None
    const: bool


@dataclass(frozen=True, slots=True)
class InputDecl:
    tok: Token
    type: TypeSpec
    name: Token


@dataclass(frozen=True, slots=True)
class Modifier:
    tok: Token
    kind: str  # ctrl, negctrl, inv, pow
    arg: Expr | None


@dataclass(frozen=True, slots=True)
class GateCall:
    tok: Token
    modifiers: tuple[Modifier, ...]
    name: Token
    args: tuple[Expr, ...]
    operands: tuple[Operand, ...]


@dataclass(frozen=True, slots=True)
class GateDef:
    tok: Token
    name: Token
    params: tuple[str, ...]
    qubits: tuple[str, ...]
    body: tuple[Statement, ...]


@dataclass(frozen=True, slots=True)
class Measure:
    tok: Token
    source: Operand
    target: Operand | None


@dataclass(frozen=True, slots=True)
class Reset:
    tok: Token
    operands: tuple[Operand, ...]


@dataclass(frozen=True, slots=True)
class Barrier:
    tok: Token
    operands: tuple[Operand, ...]


@dataclass(frozen=True, slots=True)
class Assign:
    tok: Token
    target: Operand
    op: str  # "=", "+=", ...
    value: Expr


@dataclass(frozen=True, slots=True)
class For:
    tok: Token
    type: TypeSpec
    var: Token
    over: RangeSpec | SetSpec
    body: tuple[Statement, ...]


@dataclass(frozen=True, slots=True)
class If:
    tok: Token
    condition: Expr
    then: tuple[Statement, ...]
    otherwise: tuple[Statement, ...] | None


Statement = (
    Include | QubitDecl | BitDecl | VarDecl | InputDecl | GateCall | GateDef | Measure | Reset
    | Barrier | Assign | For | If
)  # fmt: skip
