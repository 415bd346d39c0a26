"""Classical values known when a program is read: ``int``, ``uint``, ``float``, ``bool``
and bit strings, with the operators, casts and built-in functions of the specification
(../shared/corpus/qasm3/spec/classical.rst and types.rst).

Integers are exact Python ints wrapped to their declared width when stored; ``/`` on two
integers is integer division truncating toward zero, ``%`` its remainder (C's rule, which
the specification's footnote on integer division points to); ``^`` is exclusive or and
``**`` the power (unlike OpenQASM 2.0, where ``^`` was the power).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import NamedTuple, NoReturn

from jobkeeper.circuit.lexer import Token
from jobkeeper.circuit.qasm3 import nodes as n


class Bits(NamedTuple):
    """A bit string: ``value`` with bit 0 the least significant, ``width`` bits."""

    value: int
    width: int


Value = bool | int | float | Bits
Fail = Callable[[str, Token], NoReturn]
Resolve = Callable[[Token], Value]

CONSTANTS = {
    "pi": math.pi,
    "π": math.pi,
    "tau": math.tau,
    "τ": math.tau,
    "euler": math.e,
    "ℯ": math.e,
}
#: Python ints past this many bits are refused: they only arise from runaway ``**``/``<<``.
MAX_INT_BITS = 4096

_FUNCTIONS: dict[str, Callable[[float], float]] = {
    "sin": math.sin,
    "cos": math.cos,
    "tan": math.tan,
    "arcsin": math.asin,
    "arccos": math.acos,
    "arctan": math.atan,
    "exp": math.exp,
    "log": math.log,
    "sqrt": math.sqrt,
}


def number(v: Value) -> int | float:
    if isinstance(v, Bits):
        return v.value
    if isinstance(v, bool):
        return int(v)
    return v


def truthy(v: Value) -> bool:
    return bool(number(v))


def wrap(value: int, width: int, signed: bool) -> int:
    value &= (1 << width) - 1
    if signed and value >= 1 << (width - 1):
        value -= 1 << width
    return value


class Evaluator:
    """Evaluates expressions; ``resolve`` gives the value of a name (or raises)."""

    def __init__(
        self,
        resolve: Resolve,
        fail: Fail,
        size: Callable[[n.Expr], int],
        width_of: Callable[[Token], int | None] = lambda tok: None,
    ) -> None:
        self.width_of = width_of
        self.resolve = resolve
        self.fail = fail
        self.size = size

    def __call__(self, expr: n.Expr) -> Value:
        return self.eval(expr)

    def eval(self, expr: n.Expr) -> Value:
        if isinstance(expr, n.Lit):
            value = expr.value
            if isinstance(value, tuple):
                return Bits(*value)
            assert isinstance(value, bool | int | float)
            return value
        if isinstance(expr, n.Name):
            if expr.tok.text in CONSTANTS:
                return CONSTANTS[expr.tok.text]
            return self.resolve(expr.tok)
        if isinstance(expr, n.Chain):
            acc = self.eval(expr.first)
            for op, item in expr.rest:
                acc = self.binary(op, acc, self.eval(item))
            return acc
        if isinstance(expr, n.Unary):
            return self.unary(expr)
        if isinstance(expr, n.Power):
            return self.power(expr.tok, self.eval(expr.base), self.eval(expr.exponent))
        if isinstance(expr, n.Cast):
            return self.cast(expr.type, self.eval(expr.arg), expr.tok)
        if isinstance(expr, n.Call):
            return self.call(expr)
        if isinstance(expr, n.Index):
            return self.index(expr)
        self.fail("unsupported expression", expr.tok)

    def finite(self, value: float, tok: Token) -> float:
        if not math.isfinite(value):
            self.fail("expression value is not a finite number", tok)
        return value

    def integer(self, v: Value, tok: Token) -> int:
        x = number(v)
        if isinstance(x, float):
            self.fail(f"expected an integer, found {x!r}", tok)
        if x.bit_length() > MAX_INT_BITS:
            self.fail(f"integer wider than {MAX_INT_BITS} bits", tok)
        return x

    def unary(self, expr: n.Unary) -> Value:
        return self.unary_of(expr, self.eval(expr.operand))

    def unary_of(self, expr: n.Unary, v: Value) -> Value:
        """``expr``'s operator applied to its operand's value ``v``."""
        if expr.op == "!":
            return not truthy(v)
        if expr.op == "~":
            if isinstance(v, Bits):
                return Bits(~v.value & ((1 << v.width) - 1), v.width)
            return ~self.integer(v, expr.tok)
        return -number(v)

    def binary(self, tok: Token, a: Value, b: Value) -> Value:
        op = tok.text
        if op == "&&":
            return truthy(a) and truthy(b)
        if op == "||":
            return truthy(a) or truthy(b)
        x, y = number(a), number(b)
        if op == "==":
            return x == y
        if op == "!=":
            return x != y
        if op == "<":
            return x < y
        if op == "<=":
            return x <= y
        if op == ">":
            return x > y
        if op == ">=":
            return x >= y
        if op in ("&", "|", "^", "<<", ">>"):
            return self.bitwise(tok, a, b)
        if isinstance(x, int) and isinstance(y, int):
            if op == "+":
                return self.checked(x + y, tok)
            if op == "-":
                return self.checked(x - y, tok)
            if op == "*":
                return self.checked(x * y, tok) if x and y else 0
            if y == 0:
                self.fail("division by zero", tok)
            quotient = abs(x) // abs(y) * (1 if (x >= 0) == (y >= 0) else -1)
            return quotient if op == "/" else x - y * quotient
        fx, fy = float(x), float(y)
        if op == "+":
            return self.finite(fx + fy, tok)
        if op == "-":
            return self.finite(fx - fy, tok)
        if op == "*":
            return self.finite(fx * fy, tok)
        if fy == 0:
            self.fail("division by zero", tok)
        return self.finite(fx / fy if op == "/" else math.fmod(fx, fy), tok)

    def checked(self, value: int, tok: Token) -> int:
        if value.bit_length() > MAX_INT_BITS:
            self.fail(f"integer wider than {MAX_INT_BITS} bits", tok)
        return value

    def bitwise(self, tok: Token, a: Value, b: Value) -> Value:
        op = tok.text
        width = a.width if isinstance(a, Bits) else None
        x, y = self.integer(a, tok), self.integer(b, tok)
        if op in ("<<", ">>"):
            if y < 0 or y > MAX_INT_BITS:
                self.fail(f"shift by {y} is out of range", tok)
            result = x << y if op == "<<" else x >> y
        elif op == "&":
            result = x & y
        elif op == "|":
            result = x | y
        else:
            result = x ^ y
        if width is not None:
            return Bits(result & ((1 << width) - 1), width)
        return self.checked(result, tok)

    def power(self, tok: Token, a: Value, b: Value) -> Value:
        x, y = number(a), number(b)
        if isinstance(x, int) and isinstance(y, int) and y >= 0:
            if abs(x) > 1 and y * x.bit_length() > MAX_INT_BITS:
                self.fail(f"integer wider than {MAX_INT_BITS} bits", tok)
            result: int = x**y
            return result
        try:
            # math.pow: a negative base with a fractional exponent is an error, not complex.
            return self.finite(math.pow(float(x), float(y)), tok)
        except (OverflowError, ValueError, ZeroDivisionError):
            self.fail(f"{x!r}**{y!r} has no finite real value", tok)

    def cast(self, spec: n.TypeSpec, v: Value, tok: Token) -> Value:
        width = None if spec.size is None else self.size(spec.size)
        name = spec.name
        if name == "bool":
            return truthy(v)
        if name == "float":
            return float(number(v))
        if name == "angle":
            self.fail("angle is not supported", tok)
        x = number(v)
        if isinstance(x, float):
            if name == "bit":
                self.fail("cannot cast a float to bits", tok)
            x = int(x)  # truncation toward zero (classical.rst, "Casting")
        if name == "bit":
            w = width or (v.width if isinstance(v, Bits) else 1)
            return Bits(x & ((1 << w) - 1), w)
        if width is None:
            return x if name == "int" or x >= 0 else self.fail_negative(tok)
        if isinstance(v, Bits) and name == "int":
            return wrap(x, width, signed=True)
        return wrap(x, width, signed=name == "int")

    def fail_negative(self, tok: Token) -> NoReturn:
        self.fail("a negative value cannot be a uint without a width", tok)

    def call(self, expr: n.Call) -> Value:
        return self.call_of(expr, [self.eval(a) for a in expr.args])

    def call_of(self, expr: n.Call, args: list[Value]) -> Value:
        """The built-in function ``expr`` names, on its arguments' values ``args``."""
        name = expr.tok.text
        if name in _FUNCTIONS or name in ("ceiling", "floor", "popcount"):
            if len(args) != 1:
                self.fail(f"{name} takes one argument, {len(args)} given", expr.tok)
            (a,) = args
            if name == "popcount":
                return bin(self.integer(a, expr.tok) & ((1 << MAX_INT_BITS) - 1)).count("1")
            x = float(number(a))
            if name == "ceiling":
                return math.ceil(self.finite(x, expr.tok))
            if name == "floor":
                return math.floor(self.finite(x, expr.tok))
            try:
                return self.finite(_FUNCTIONS[name](x), expr.tok)
            except (OverflowError, ValueError):
                self.fail(f"{name}({x!r}) has no finite real value", expr.tok)
        if name == "mod":
            if len(args) != 2:
                self.fail(f"mod takes two arguments, {len(args)} given", expr.tok)
            return self.binary(expr.tok._replace(text="%"), args[0], args[1])
        self.fail(f"unknown function '{name}' (subroutines are not supported)", expr.tok)

    def index(self, expr: n.Index) -> Value:
        v = self.eval(expr.base)
        if isinstance(v, float):
            self.fail("a float cannot be indexed", expr.tok)
        width = v.width if isinstance(v, Bits) else None
        if width is None and isinstance(expr.base, n.Name):
            width = self.width_of(expr.base.tok)  # a declared int[n] or uint[n]
        x = self.integer(v, expr.tok)
        if width is not None:
            x &= (1 << width) - 1  # two's complement bits of a negative int[n]
        sel = expr.selector
        if isinstance(sel, n.Expr):
            i = self.integer(self.eval(sel), sel.tok)
            if i < 0 and width is not None:
                i += width
            if i < 0 or (width is not None and i >= width) or i > MAX_INT_BITS:
                self.fail(f"bit index {i} out of range", sel.tok)
            return Bits((x >> i) & 1, 1)
        if width is None:
            self.fail("slices of an integer need its width (use a cast to bit[n])", expr.tok)
        positions = self.selection(sel, width)
        value = 0
        for k, p in enumerate(positions):
            value |= ((x >> p) & 1) << k
        return Bits(value, len(positions))

    def selection(self, sel: n.RangeSpec | n.SetSpec, size: int) -> list[int]:
        """Positions picked by a range or set from something of ``size`` elements."""
        if isinstance(sel, n.SetSpec):
            items = [self.integer(self.eval(e), e.tok) for e in sel.items]
        else:
            start = 0 if sel.start is None else self.integer(self.eval(sel.start), sel.tok)
            step = 1 if sel.step is None else self.integer(self.eval(sel.step), sel.tok)
            stop = size - 1 if sel.stop is None else self.integer(self.eval(sel.stop), sel.tok)
            if step == 0:
                self.fail("a range's step cannot be 0", sel.tok)
            start, stop = start + size if start < 0 else start, stop + size if stop < 0 else stop
            items = list(range(start, stop + (1 if step > 0 else -1), step)[: size + 1])
        for i in items:
            if not -size <= i < size:
                self.fail(f"index {i} out of range for {size} elements", sel.tok)
        return [i + size if i < 0 else i for i in items]
