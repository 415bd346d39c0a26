"""Parameter expressions of OpenQASM 2.0 (arXiv:1707.03429, section 3 and the grammar's
``exp``): real and integer literals, ``pi``, gate parameters, ``+ - * / ^``, unary minus
and the functions sin, cos, tan, exp, ln, sqrt.

Chains such as ``a+b+c+...`` are kept flat rather than as a left-deep tree, so that no
input builds a tree deeper than its parenthesis/unary/power nesting, and that nesting is
bounded: neither parsing nor evaluating can exhaust the interpreter's stack.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

from jobkeeper.circuit.lexer import ID, INT, REAL, SYMBOL, Token, TokenStream

#: Parentheses, unary minus and ``^`` nested deeper than this are refused. Real programs
#: stay in single digits; the bound keeps recursion far from Python's stack limit.
MAX_NESTING = 48

FUNCTIONS: dict[str, Callable[[float], float]] = {
    "sin": math.sin,
    "cos": math.cos,
    "tan": math.tan,
    "exp": math.exp,
    "ln": math.log,
    "sqrt": math.sqrt,
}


class ExpressionError(ValueError):
    """An expression has no finite real value (division by zero, ln of 0, overflow...)."""


def _finite(value: float) -> float:
    if not math.isfinite(value):
        raise ExpressionError("expression value is not a finite number")
    return value


class Expr:
    """A parsed expression; ``size`` counts its nodes (the cost of one evaluation)."""

    __slots__ = ("size",)

    def __init__(self, size: int) -> None:
        self.size = size

    def evaluate(self, env: Sequence[float]) -> float:
        raise NotImplementedError


class Num(Expr):
    __slots__ = ("value",)

    def __init__(self, value: float) -> None:
        super().__init__(1)
        self.value = value

    def evaluate(self, env: Sequence[float]) -> float:
        return self.value


class Param(Expr):
    __slots__ = ("index",)

    def __init__(self, index: int) -> None:
        super().__init__(1)
        self.index = index

    def evaluate(self, env: Sequence[float]) -> float:
        return env[self.index]


class Neg(Expr):
    __slots__ = ("operand",)

    def __init__(self, operand: Expr) -> None:
        super().__init__(operand.size + 1)
        self.operand = operand

    def evaluate(self, env: Sequence[float]) -> float:
        return -self.operand.evaluate(env)


class Chain(Expr):
    """``first op1 x1 op2 x2 ...`` for one precedence level (``+ -`` or ``* /``)."""

    __slots__ = ("first", "rest")

    def __init__(self, first: Expr, rest: list[tuple[str, Expr]]) -> None:
        super().__init__(first.size + sum(e.size + 1 for _, e in rest))
        self.first = first
        self.rest = rest

    def evaluate(self, env: Sequence[float]) -> float:
        acc = self.first.evaluate(env)
        try:
            for op, expr in self.rest:
                value = expr.evaluate(env)
                if op == "+":
                    acc = acc + value
                elif op == "-":
                    acc = acc - value
                elif op == "*":
                    acc = acc * value
                else:
                    acc = acc / value
                _finite(acc)
        except ZeroDivisionError:
            raise ExpressionError("division by zero") from None
        return acc


class Pow(Expr):
    __slots__ = ("base", "exponent")

    def __init__(self, base: Expr, exponent: Expr) -> None:
        super().__init__(base.size + exponent.size + 1)
        self.base = base
        self.exponent = exponent

    def evaluate(self, env: Sequence[float]) -> float:
        base = self.base.evaluate(env)
        exponent = self.exponent.evaluate(env)
        try:
            # math.pow, not **: a negative base with a fractional exponent must be an
            # error, not a complex number.
            return _finite(math.pow(base, exponent))
        except (OverflowError, ValueError, ZeroDivisionError):
            raise ExpressionError(f"{base!r}^{exponent!r} has no finite real value") from None


class Call(Expr):
    __slots__ = ("argument", "name")

    def __init__(self, name: str, argument: Expr) -> None:
        super().__init__(argument.size + 1)
        self.name = name
        self.argument = argument

    def evaluate(self, env: Sequence[float]) -> float:
        value = self.argument.evaluate(env)
        try:
            return _finite(FUNCTIONS[self.name](value))
        except (OverflowError, ValueError):
            raise ExpressionError(f"{self.name}({value!r}) has no finite real value") from None


def _const(expr: Expr, stream: TokenStream, at: Token) -> Expr:
    """Fold an expression without parameters now, so that its errors point at it."""
    if isinstance(expr, Num):
        return expr
    if _has_params(expr):
        return expr
    try:
        return Num(expr.evaluate(()))
    except ExpressionError as exc:
        stream.fail(str(exc), at)


def _has_params(expr: Expr) -> bool:
    # Bounded by MAX_NESTING except along flat chains, which are walked in a loop.
    if isinstance(expr, Param):
        return True
    if isinstance(expr, Neg):
        return _has_params(expr.operand)
    if isinstance(expr, Chain):
        return _has_params(expr.first) or any(_has_params(e) for _, e in expr.rest)
    if isinstance(expr, Pow):
        return _has_params(expr.base) or _has_params(expr.exponent)
    if isinstance(expr, Call):
        return _has_params(expr.argument)
    return False


class ExpressionParser:
    """Recursive descent over ``exp``; ``params`` maps a gate's parameter names to their
    positions (empty outside gate bodies, where only ``pi`` may be named)."""

    def __init__(self, stream: TokenStream, params: dict[str, int]) -> None:
        self.stream = stream
        self.params = params
        self.depth = 0

    def parse(self) -> Expr:
        start = self.stream.peek()
        return _const(self._sum(), self.stream, start)

    def _nest(self) -> None:
        self.depth += 1
        if self.depth > MAX_NESTING:
            self.stream.fail(
                f"expression nested more than {MAX_NESTING} levels deep",
                self.stream.prev or self.stream.peek(),
            )

    def _sum(self) -> Expr:
        first = self._product()
        rest: list[tuple[str, Expr]] = []
        while True:
            tok = self.stream.peek()
            if tok.kind == SYMBOL and tok.text in ("+", "-"):
                self.stream.advance()
                rest.append((tok.text, self._product()))
            else:
                break
        return Chain(first, rest) if rest else first

    def _product(self) -> Expr:
        first = self._unary()
        rest: list[tuple[str, Expr]] = []
        while True:
            tok = self.stream.peek()
            if tok.kind == SYMBOL and tok.text in ("*", "/"):
                self.stream.advance()
                rest.append((tok.text, self._unary()))
            else:
                break
        return Chain(first, rest) if rest else first

    def _unary(self) -> Expr:
        if self.stream.peek_is("-"):
            self.stream.advance()
            self._nest()
            operand = self._unary()
            self.depth -= 1
            return Neg(operand)
        return self._power()

    def _power(self) -> Expr:
        base = self._primary()
        if self.stream.peek_is("^"):
            self.stream.advance()
            self._nest()
            exponent = self._unary()  # right-associative: 2^3^2 = 2^(3^2)
            self.depth -= 1
            return Pow(base, exponent)
        return base

    def _primary(self) -> Expr:
        stream = self.stream
        tok = stream.peek()
        if tok.kind in (INT, REAL):
            stream.advance()
            value = float(tok.text)
            if not math.isfinite(value):
                stream.fail(f"number {tok.text[:40]} is too large", tok)
            return Num(value)
        if tok.kind == ID:
            if tok.text == "pi":
                stream.advance()
                return Num(math.pi)
            if tok.text in FUNCTIONS:
                stream.advance()
                stream.expect("(")
                self._nest()
                argument = self._sum()
                self.depth -= 1
                stream.expect(")")
                return Call(tok.text, argument)
            if tok.text in self.params:
                stream.advance()
                return Param(self.params[tok.text])
            if self.params:
                stream.fail(f"unknown parameter '{tok.text}' in expression", tok)
            stream.fail(
                f"unknown name '{tok.text}' in expression (only gate bodies have parameters)",
                tok,
            )
        if tok.kind == SYMBOL and tok.text == "(":
            stream.advance()
            self._nest()
            inner = self._sum()
            self.depth -= 1
            stream.expect(")")
            return inner
        stream.fail_expected("an expression")


def parse_expression(stream: TokenStream, params: dict[str, int]) -> Expr:
    return ExpressionParser(stream, params).parse()
