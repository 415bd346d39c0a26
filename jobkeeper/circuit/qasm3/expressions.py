"""OpenQASM 3 expressions: tokens → :mod:`.nodes` expression trees, by recursive descent
over the precedence levels of the specification's grammar (qasm3Parser.g4,
``expression``): ``||``, ``&&``, ``|``, ``^``, ``&``, ``== !=``, ``< <= > >=``,
``<< >>``, ``+ -``, ``* / %``, then unary ``- ! ~``, then ``**`` (right-associative,
binding tighter than unary minus), then indexing, casts and calls. Chains at one level
are kept flat; nesting is bounded by :data:`MAX_NESTING`.
"""

from __future__ import annotations

import math

from jobkeeper.circuit.lexer import ID, INT, REAL, STRING, SYMBOL, Token, TokenStream
from jobkeeper.circuit.qasm3 import nodes as n
from jobkeeper.circuit.qasm3.lexer import DURATION, HWQ, IMAG
from jobkeeper.circuit.qasm3.words import (
    KEYWORDS,
    MAX_NESTING,
    SCALAR_TYPES,
    UNSUPPORTED,
    unsupported,
)

_LEVELS: tuple[frozenset[str], ...] = (
    frozenset({"||"}),
    frozenset({"&&"}),
    frozenset({"|"}),
    frozenset({"^"}),
    frozenset({"&"}),
    frozenset({"==", "!="}),
    frozenset({"<", "<=", ">", ">="}),
    frozenset({"<<", ">>"}),
    frozenset({"+", "-"}),
    frozenset({"*", "/", "%"}),
)
_BASE = {"0b": 2, "0B": 2, "0o": 8, "0O": 8, "0x": 16, "0X": 16}


class ExpressionParser:
    def __init__(self, stream: TokenStream) -> None:
        self.s = stream
        self.depth = 0

    def nest(self, tok: Token) -> None:
        self.depth += 1
        if self.depth > MAX_NESTING:
            self.s.fail(f"nested more than {MAX_NESTING} levels deep", tok)

    def type_spec(self) -> n.TypeSpec:
        s = self.s
        tok = s.advance()
        size: n.Expr | None = None
        if tok.text in ("int", "uint", "float", "bit", "angle") and s.accept("["):
            size = self.expression()
            s.expect("]")
        return n.TypeSpec(tok, tok.text, size)

    def selector(self) -> n.Selector:
        """What follows ``[``, through the closing ``]``."""
        s = self.s
        tok = s.peek()
        if s.accept("{"):
            items = self.expressions()
            s.expect("}")
            s.expect("]")
            return n.SetSpec(tok, items)
        first = None if s.peek_is(":") else self.expression()
        if not s.peek_is(":"):
            if s.peek_is(","):
                unsupported(s, "multi-dimensional indexing", s.peek())
            s.expect("]")
            assert first is not None
            return first
        spec = self.range_rest(tok, first, "]")
        s.expect("]")
        return spec

    def range_rest(self, tok: Token, first: n.Expr | None, close: str) -> n.RangeSpec:
        s = self.s
        s.expect(":")
        second = None if s.peek_is(":") or s.peek_is(close) else self.expression()
        if s.accept(":"):
            third = None if s.peek_is(close) else self.expression()
            return n.RangeSpec(tok, first, second, third)
        return n.RangeSpec(tok, first, None, second)

    def expressions(self) -> list[n.Expr]:
        items = [self.expression()]
        while self.s.accept(","):
            items.append(self.expression())
        return items

    def expression(self, level: int = 0) -> n.Expr:
        if level == len(_LEVELS):
            return self.unary()
        s = self.s
        start = s.peek()
        first = self.expression(level + 1)
        rest: list[tuple[Token, n.Expr]] = []
        ops = _LEVELS[level]
        while True:
            tok = s.peek()
            if tok.kind == SYMBOL and tok.text in ops:
                s.advance()
                rest.append((tok, self.expression(level + 1)))
            else:
                break
        return n.Chain(start, first, rest) if rest else first

    def unary(self) -> n.Expr:
        s = self.s
        tok = s.peek()
        if tok.kind == SYMBOL and tok.text in ("-", "!", "~"):
            s.advance()
            self.nest(tok)
            operand = self.unary()
            self.depth -= 1
            return n.Unary(tok, tok.text, operand)
        base = self.postfix()
        if s.peek_is("**"):
            op = s.advance()
            self.nest(op)
            exponent = self.unary()  # right-associative, and binds tighter than unary minus
            self.depth -= 1
            return n.Power(op, base, exponent)
        return base

    def postfix(self) -> n.Expr:
        s = self.s
        expr = self.primary()
        while s.peek_is("["):
            tok = s.advance()
            self.nest(tok)
            expr = n.Index(tok, expr, self.selector())
            self.depth -= 1
        return expr

    def primary(self) -> n.Expr:
        s = self.s
        tok = s.peek()
        if tok.kind == INT:
            s.advance()
            text = tok.text.replace("_", "")
            return n.Lit(tok, int(text[2:], _BASE[text[:2]]) if text[:2] in _BASE else int(text))
        if tok.kind == REAL:
            s.advance()
            value = float(tok.text.replace("_", ""))
            if not math.isfinite(value):
                s.fail(f"number {tok.text[:40]} is too large", tok)
            return n.Lit(tok, value)
        if tok.kind == STRING:
            s.advance()
            digits = tok.text.replace("_", "")
            if not digits or set(digits) - {"0", "1"} or tok.text.endswith("_"):
                s.fail('expected a bit string such as "0101"', tok)
            return n.Lit(tok, (int(digits, 2), len(digits)))
        if tok.kind == DURATION:
            unsupported(s, "duration literals", tok)
        if tok.kind == IMAG:
            unsupported(s, "complex numbers", tok)
        if tok.kind == HWQ:
            unsupported(s, "physical qubits ($n)", tok)
        if tok.kind == SYMBOL and tok.text == "(":
            s.advance()
            self.nest(tok)
            inner = self.expression()
            self.depth -= 1
            s.expect(")")
            return inner
        if tok.kind == ID:
            if tok.text in UNSUPPORTED:
                unsupported(s, UNSUPPORTED[tok.text], tok)
            if tok.text in ("true", "false"):
                s.advance()
                return n.Lit(tok, tok.text == "true")
            if tok.text == "measure":
                s.fail("measure cannot be part of an expression", tok)
            if tok.text in SCALAR_TYPES:
                spec = self.type_spec()
                s.expect("(")
                self.nest(tok)
                arg = self.expression()
                self.depth -= 1
                s.expect(")")
                return n.Cast(tok, spec, arg)
            if tok.text in KEYWORDS:
                s.fail_expected("an expression")
            s.advance()
            if s.accept("("):
                self.nest(tok)
                args = [] if s.peek_is(")") else self.expressions()
                self.depth -= 1
                s.expect(")")
                return n.Call(tok, args)
            return n.Name(tok)
        s.fail_expected("an expression")
