"""``if`` on measured bits, as the IR's existing conditioning.

The IR's ``Condition(bits, value)`` tests one whole bit register for one value, and the
simulators already branch on it exactly. An ``if`` is evaluated for every value its
register can hold, and each operation of the branch is emitted once per value that makes
the condition true (at most one copy runs: the values are exclusive); ``else`` takes the
other values. So ``if (c[0]) x q;`` on a ``bit[2] c`` is ``if(c==1) x q; if(c==3) x q;``.
A branch may not measure into the register its condition reads (the copies would then
stop being exclusive), and a condition reads one register.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import replace

from jobkeeper.circuit.ir import BARRIER, Condition, Operation
from jobkeeper.circuit.lexer import Token
from jobkeeper.circuit.qasm3 import nodes as n
from jobkeeper.circuit.qasm3.state import State
from jobkeeper.circuit.qasm3.values import truthy

#: Conditions are expanded over every value of the register they read; past this many
#: bits only ``register == value`` (without else) is accepted.
MAX_ENUMERATED_BITS = 10


def runtime_if(interp: State, stmt: n.If) -> None:
    names = {tok.text for tok in _names(stmt.condition) if is_register_name(interp, tok.text)}
    if len(names) != 1:
        interp.unsupported("a condition on more than one bit register", stmt.condition.tok)
    (name,) = names
    reg, _ = interp.cregs[name]
    if reg.size <= MAX_ENUMERATED_BITS:
        true_values = set()
        interp.charge(1 << reg.size)
        for v in range(1 << reg.size):
            interp.runtime_bits = {name: v}
            try:
                if truthy(interp.evaluate(stmt.condition)):
                    true_values.add(v)
            finally:
                interp.runtime_bits = None
        every = frozenset(range(1 << reg.size))
    else:
        value = equality_value(interp, stmt.condition, name)
        if value is None or stmt.otherwise is not None:
            interp.unsupported(
                f"a condition on a register of more than {MAX_ENUMERATED_BITS} bits "
                "other than 'register == value' without else",
                stmt.condition.tok,
            )
        assert value is not None
        true_values = {value} if 0 <= value < 1 << reg.size else set()
        every = frozenset(true_values)
    outer = interp.condition
    if outer is not None and outer[0] != reg:
        interp.unsupported("nested conditions on different bit registers", stmt.condition.tok)
    allowed = every if outer is None else outer[1]
    for body, chosen in (
        (stmt.then, frozenset(true_values)),
        (stmt.otherwise, every - true_values),
    ):
        chosen &= allowed
        if body is None or not chosen:
            continue
        interp.condition = None if chosen == every and outer is None else (reg, chosen)
        try:
            interp.block(body)
        finally:
            interp.condition = outer


def equality_value(interp: State, cond: n.Expr, name: str) -> int | None:
    """``v`` when ``cond`` is ``name == v`` (either side), else None."""
    if not (isinstance(cond, n.Chain) and len(cond.rest) == 1 and cond.rest[0][0].text == "=="):
        return None
    left, right = cond.first, cond.rest[0][1]
    if isinstance(right, n.Name) and right.tok.text == name:
        left, right = right, left
    if not (isinstance(left, n.Name) and left.tok.text == name):
        return None
    return interp.evaluator.integer(interp.evaluate(right), right.tok)


def is_register_name(interp: State, name: str) -> bool:
    return name in interp.cregs and not any(name in scope for scope in interp.scopes)


def emit(interp: State, ops: list[Operation]) -> None:
    if interp.condition is None:
        interp.ops.extend(ops)
        return
    reg, values = interp.condition
    bits = tuple(range(reg.offset, reg.offset + reg.size))
    for op in ops:
        if op.name == BARRIER:
            interp.ops.append(op)
            continue
        interp.charge(len(values))
        for v in sorted(values):
            interp.ops.append(replace(op, condition=Condition(bits, v)))

    # ---- quantum ---------------------------------------------------------------------


def _names(expr: n.Expr) -> Iterator[Token]:
    """Name tokens in an expression (depth bounded by the parser's nesting limit)."""
    if isinstance(expr, n.Name):
        yield expr.tok
    elif isinstance(expr, n.Chain):
        yield from _names(expr.first)
        for _, item in expr.rest:
            yield from _names(item)
    elif isinstance(expr, n.Unary):
        yield from _names(expr.operand)
    elif isinstance(expr, n.Power):
        yield from _names(expr.base)
        yield from _names(expr.exponent)
    elif isinstance(expr, n.Cast):
        yield from _names(expr.arg)
    elif isinstance(expr, n.Call):
        for arg in expr.args:
            yield from _names(arg)
    elif isinstance(expr, n.Index):
        yield from _names(expr.base)
        if isinstance(expr.selector, n.Expr):
            yield from _names(expr.selector)
