"""Running a template once with symbolic ``float`` inputs, to learn which parameters of
which operations depend on them and how (:mod:`.compiled` turns that into one Python
function per template).

A :class:`Sym` stands for a float computed from the inputs. It supports exactly the
arithmetic the interpreter does on floats (``+ - * /``, ``%`` as ``math.fmod``, ``**`` as
``math.pow``, unary minus, the built-in functions, ``float(…)`` casts), each recorded as
one line of a :class:`Tape` that repeats the interpreter's own float operation on the
same operands, so evaluating the tape gives bit for bit the floats the interpreter would
compute. Anything that needs the value itself — a comparison, a truth test, an integer
cast, a loop bound, a real ``pow`` modifier, a matrix built from an angle — raises
:class:`NeedsValue` (or fails in some other way): the trace is then abandoned and such a
template is bound the slow way, by running the interpreter per point. The trace never
guesses: a program either traces to the one structure every binding gives, or is not
traced.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from typing import Any, NoReturn, cast

from jobkeeper.circuit.canonical import round_param
from jobkeeper.circuit.ir import Operation
from jobkeeper.circuit.lexer import Token
from jobkeeper.circuit.qasm3 import nodes as n
from jobkeeper.circuit.qasm3.interpret import Interpreter
from jobkeeper.circuit.qasm3.sinks import OperationSink
from jobkeeper.circuit.qasm3.values import _FUNCTIONS, Evaluator, Value, number

#: a template whose trace records more float operations than this is bound the slow way.
MAX_TAPE = 200_000


class NeedsValue(Exception):
    """The program needs an input's value, not just its expression: no trace."""


class Tape:
    """The float operations of a trace, in order; temporaries ``t0, t1, …``; the inputs
    are ``v0, v1, …``; functions are referred to by name in :attr:`functions`."""

    def __init__(self) -> None:
        self.lines: list[str] = []
        self.functions: dict[str, Callable[..., float]] = {"_pow": math.pow, "_fmod": math.fmod}

    def record(self, expression: str) -> Sym:
        if len(self.lines) >= MAX_TAPE:
            raise NeedsValue("trace too long")
        name = f"t{len(self.lines)}"
        self.lines.append(f"{name} = {expression}")
        return Sym(self, name)


def _operand(tape: Tape, value: object) -> str:
    if isinstance(value, Sym):
        if value.tape is not tape:
            raise NeedsValue("values of two traces")
        return value.name
    if isinstance(value, bool | int | float):
        # The interpreter turns every operand of float arithmetic into a float first.
        return repr(float(value))
    raise NeedsValue(f"an operand of type {type(value).__name__}")


class Sym:
    """A float known only as an expression of the inputs (see the module docstring)."""

    __slots__ = ("name", "tape")

    def __init__(self, tape: Tape, name: str) -> None:
        self.tape = tape
        self.name = name

    def _binary(self, op: str, other: object, swapped: bool = False) -> Sym:
        if not isinstance(other, Sym | bool | int | float):
            return NotImplemented  # type: ignore[no-any-return]
        a, b = _operand(self.tape, self), _operand(self.tape, other)
        if swapped:
            a, b = b, a
        if op == "%":
            return self.tape.record(f"_fmod({a}, {b})")
        if op == "**":
            return self.tape.record(f"_pow({a}, {b})")
        return self.tape.record(f"{a} {op} {b}")

    def __add__(self, other: object) -> Sym:
        return self._binary("+", other)

    def __radd__(self, other: object) -> Sym:
        return self._binary("+", other, swapped=True)

    def __sub__(self, other: object) -> Sym:
        return self._binary("-", other)

    def __rsub__(self, other: object) -> Sym:
        return self._binary("-", other, swapped=True)

    def __mul__(self, other: object) -> Sym:
        return self._binary("*", other)

    def __rmul__(self, other: object) -> Sym:
        return self._binary("*", other, swapped=True)

    def __truediv__(self, other: object) -> Sym:
        return self._binary("/", other)

    def __rtruediv__(self, other: object) -> Sym:
        return self._binary("/", other, swapped=True)

    def __neg__(self) -> Sym:
        return self.tape.record(f"-{self.name}")

    def _needs(self, *_: object) -> NoReturn:
        raise NeedsValue("the program needs an input's value")

    __bool__ = __float__ = __int__ = __index__ = __complex__ = _needs
    __round__ = __trunc__ = __floor__ = __ceil__ = __abs__ = _needs
    __eq__ = __ne__ = __lt__ = __le__ = __gt__ = __ge__ = _needs
    __hash__ = object.__hash__


def _has_sym(*values: object) -> bool:
    return any(isinstance(v, Sym) for v in values)


class TracingEvaluator(Evaluator):
    """The interpreter's evaluator, with float arithmetic on :class:`Sym` recorded."""

    def binary(self, tok: Token, a: Value, b: Value) -> Value:
        if not _has_sym(a, b):
            return super().binary(tok, a, b)
        if tok.text not in ("+", "-", "*", "/", "%"):
            raise NeedsValue(tok.text)
        x, y = cast(Any, number(a)), cast(Any, number(b))
        sym = x if isinstance(x, Sym) else y
        return cast(Value, sym._binary(tok.text, y if sym is x else x, swapped=sym is not x))

    def unary_of(self, expr: n.Unary, v: Value) -> Value:
        if not isinstance(v, Sym):
            return super().unary_of(expr, v)
        if expr.op != "-":
            raise NeedsValue(expr.op)
        return cast(Value, -v)

    def power(self, tok: Token, a: Value, b: Value) -> Value:
        if not _has_sym(a, b):
            return super().power(tok, a, b)
        x, y = cast(Any, number(a)), cast(Any, number(b))
        sym = x if isinstance(x, Sym) else y
        return cast(Value, sym._binary("**", y if sym is x else x, swapped=sym is not x))

    def cast(self, spec: n.TypeSpec, v: Value, tok: Token) -> Value:
        if not isinstance(v, Sym):
            return super().cast(spec, v, tok)
        if spec.name != "float":
            raise NeedsValue(spec.name)
        return v

    def call_of(self, expr: n.Call, args: list[Value]) -> Value:
        name = expr.tok.text
        if not _has_sym(*args):
            return super().call_of(expr, args)
        if name == "mod" and len(args) == 2:
            return self.binary(expr.tok._replace(text="%"), args[0], args[1])
        if name not in _FUNCTIONS or len(args) != 1:
            raise NeedsValue(name)
        (arg,) = args
        assert isinstance(arg, Sym)
        arg.tape.functions[f"_{name}"] = _FUNCTIONS[name]
        return cast(Value, arg.tape.record(f"_{name}({arg.name})"))


class TracingSink(OperationSink):
    """Operations whose parameters may be :class:`Sym` (rounded when evaluated)."""

    def named(self, name: str, params: tuple[float, ...], qubits: tuple[int, ...]) -> None:
        self.charge(1 + len(qubits) + len(params))
        kept = tuple(p if isinstance(p, Sym) else round_param(p) for p in params)
        self.out.append(Operation(name, qubits, kept))


class TracingInterpreter(Interpreter):
    """The interpreter run with some inputs symbolic."""

    sink_type = TracingSink

    def __init__(self, file: str | None, bindings: Mapping[str, object], tape: Tape) -> None:
        super().__init__(file, cast(Mapping[str, float], bindings))
        self.tape = tape
        self.evaluator = TracingEvaluator(self.resolve, self.fail, self.size, self.width_of)

    def number_of(self, expr: n.Expr) -> float:
        value = self.evaluate(expr)
        return cast(float, value) if isinstance(value, Sym) else float(number(value))

    def coerce(self, type_name: str, width: int | None, value: Value, tok: Token) -> Value:
        if not isinstance(value, Sym):
            return super().coerce(type_name, width, value, tok)
        if type_name not in ("float", "angle"):
            raise NeedsValue(type_name)
        return value
