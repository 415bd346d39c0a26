"""OpenQASM 3 subset: tokens → syntax tree (:mod:`.nodes`), by recursive descent.

The grammar followed is the specification's (qasm3Parser.g4 and the chapters in
../shared/corpus/qasm3/spec/). Statements outside the subset are refused where they
start, naming the feature (``delay is not supported``), never as a bare syntax error.
Nesting of blocks and expressions is bounded, so neither parsing nor running the tree
can exhaust the interpreter's stack; everything else is one pass over the tokens.
"""

from __future__ import annotations

from jobkeeper.circuit.lexer import EOF, ID, INT, REAL, STRING, SYMBOL, Token, TokenStream
from jobkeeper.circuit.qasm3 import nodes as n
from jobkeeper.circuit.qasm3.expressions import ExpressionParser
from jobkeeper.circuit.qasm3.lexer import HWQ, tokenize3
from jobkeeper.circuit.qasm3.words import (
    KEYWORDS,
    MODIFIERS,
    SCALAR_TYPES,
    SUPPORTED_VERSIONS,
    UNSUPPORTED,
    unsupported,
)

_ASSIGN_OPS = frozenset({"=", "+=", "-=", "*=", "/=", "%=", "**=", "&=", "|=", "^=", "<<=", ">>="})


def parse_program(text: str, file: str | None) -> tuple[n.Statement, ...]:
    if text.startswith("\ufeff"):
        text = text[1:]  # a byte-order mark is not part of the program (common practice)
    stream = TokenStream(tokenize3(text, file), file)
    parser = _Parser(stream)
    first = stream.peek()
    if first.kind == ID and first.text == "OPENQASM":
        stream.advance()
        version = stream.peek()
        if version.kind not in (INT, REAL) or version.text not in SUPPORTED_VERSIONS:
            stream.fail_expected("version '3' or '3.x' after OPENQASM")
        stream.advance()
        stream.expect(";")
    body: list[n.Statement] = []
    while stream.peek().kind != EOF:
        body.append(parser.statement(top=True))
    return tuple(body)


class _Parser(ExpressionParser):
    # ---- helpers ---------------------------------------------------------------------

    def name(self, what: str) -> Token:
        tok = self.s.peek()
        if tok.kind == ID and tok.text in UNSUPPORTED:
            unsupported(self.s, UNSUPPORTED[tok.text], tok)
        tok = self.s.expect_kind(ID, what)
        if tok.text in KEYWORDS:
            self.s.fail(f"'{tok.text}' is a keyword and cannot name a {what}", tok)
        return tok

    def word_is(self, word: str) -> bool:
        tok = self.s.peek()
        return tok.kind == ID and tok.text == word

    # ---- statements ------------------------------------------------------------------

    def block(self) -> tuple[n.Statement, ...]:
        s = self.s
        tok = s.peek()
        self.nest(tok)
        body: list[n.Statement] = []
        if s.accept("{"):
            while not s.accept("}"):
                if s.peek().kind == EOF:
                    s.fail_expected("'}'")
                body.append(self.statement(top=False))
        else:
            body.append(self.statement(top=False))
        self.depth -= 1
        return tuple(body)

    def statement(self, *, top: bool) -> n.Statement:
        s = self.s
        tok = s.peek()
        if tok.kind == HWQ:
            unsupported(s, "physical qubits ($n)", tok)
        if tok.kind == SYMBOL and tok.text in ("#", "@"):
            unsupported(s, "pragma" if tok.text == "#" else "annotations", tok)
        if tok.kind == SYMBOL and tok.text == "{":
            unsupported(s, "a bare block", tok)
        if tok.kind != ID:
            s.fail_expected("a statement")
        word = tok.text
        if word in UNSUPPORTED:
            unsupported(s, UNSUPPORTED[word], tok)
        if word == "OPENQASM":
            s.fail("'OPENQASM' may only be the first statement", tok)
        if word == "include":
            s.advance()
            path = s.expect_kind(STRING, "a file name in double quotes")
            s.expect(";")
            return n.Include(tok, path.text)
        if word in ("qubit", "qreg", "creg", "bit") or word in SCALAR_TYPES or word == "const":
            return self.declaration()
        if word in ("input", "output"):
            return self.io_declaration()
        if word == "gate":
            return self.gate_definition()
        if word == "measure":
            s.advance()
            source = self.operand()
            target = self.operand() if s.accept("->") else None
            s.expect(";")
            return n.Measure(tok, source, target)
        if word == "reset":
            s.advance()
            operand = self.operand()
            s.expect(";")
            return n.Reset(tok, (operand,))
        if word == "barrier":
            s.advance()
            operands: list[n.Operand] = []
            if not s.peek_is(";"):
                operands = self.operands()
            s.expect(";")
            return n.Barrier(tok, tuple(operands))
        if word == "for":
            return self.for_loop()
        if word == "if":
            s.advance()
            s.expect("(")
            condition = self.expression()
            s.expect(")")
            then = self.block()
            otherwise = self.block() if s.accept("else") else None
            return n.If(tok, condition, then, otherwise)
        if word == "else":
            s.fail("'else' without 'if'", tok)
        if word in MODIFIERS or word == "gphase":
            return self.gate_call()
        nxt = s.ahead()
        if nxt.kind == SYMBOL and (nxt.text == "[" or nxt.text in _ASSIGN_OPS):
            return self.assignment()
        if nxt.kind == SYMBOL and nxt.text in ("++", "--"):
            unsupported(s, f"'{nxt.text}'", nxt)
        return self.gate_call()

    def declaration(self) -> n.Statement:
        s = self.s
        tok = s.peek()
        if tok.text in ("qreg", "creg"):
            s.advance()
            name = self.name("register")
            size: n.Expr | None = None
            if s.accept("["):
                size = self.expression()
                s.expect("]")
            elif tok.text == "qreg":
                s.fail_expected("'['")
            s.expect(";")
            if tok.text == "qreg":
                return n.QubitDecl(tok, name, size)
            return n.BitDecl(tok, name, size, None)
        if tok.text == "qubit":
            s.advance()
            size = None
            if s.accept("["):
                size = self.expression()
                s.expect("]")
            name = self.name("qubit register")
            s.expect(";")
            return n.QubitDecl(tok, name, size)
        const = s.accept("const")
        type_tok = s.peek()
        if type_tok.kind == ID and type_tok.text in UNSUPPORTED:
            unsupported(s, UNSUPPORTED[type_tok.text], type_tok)
        if type_tok.kind != ID or type_tok.text not in SCALAR_TYPES:
            s.fail_expected("a type (int, uint, float, bool, bit)")
        spec = self.type_spec()
        if spec.name == "angle":
            unsupported(s, "angle (as a variable type; 'input angle' is supported)", type_tok)
        name = self.name("variable")
        init: n.Expr | None = None
        if s.accept("="):
            if self.word_is("measure"):
                unsupported(s, "measure in a declaration", s.peek())
            init = self.expression()
        elif const:
            s.fail_expected("'=' (a const needs a value)")
        s.expect(";")
        if spec.name == "bit" and not const:
            return n.BitDecl(tok, name, spec.size, init)
        return n.VarDecl(tok, spec, name, init, const)

    def io_declaration(self) -> n.Statement:
        s = self.s
        tok = s.advance()
        type_tok = s.peek()
        if type_tok.kind == ID and type_tok.text in UNSUPPORTED:
            unsupported(s, UNSUPPORTED[type_tok.text], type_tok)
        if type_tok.kind != ID or type_tok.text not in SCALAR_TYPES:
            s.fail_expected(f"a type after '{tok.text}'")
        spec = self.type_spec()
        name = self.name("variable")
        s.expect(";")
        if tok.text == "input":
            return n.InputDecl(tok, spec, name)
        # `output` is accepted and ignored: the declaration stays, the export does not.
        if spec.name == "bit":
            return n.BitDecl(tok, name, spec.size, None)
        if spec.name == "angle":
            unsupported(s, "angle (as a variable type; 'input angle' is supported)", type_tok)
        return n.VarDecl(tok, spec, name, None, False)

    def gate_definition(self) -> n.GateDef:
        s = self.s
        tok = s.advance()
        name = self.name("gate")
        params: list[Token] = []
        if s.accept("("):
            if not s.peek_is(")"):
                params = self.name_list("parameter")
            s.expect(")")
        qubits = self.name_list("qubit argument")
        seen = {t.text for t in params}
        for q in qubits:
            if q.text in seen:
                s.fail(f"'{q.text}' names both a parameter and a qubit argument", q)
        if not s.peek_is("{"):
            s.fail_expected("'{'")
        body = self.block()
        for stmt in body:
            if not isinstance(stmt, n.GateCall | n.Barrier):
                word = stmt.tok.text
                s.fail(
                    f"'{word}' is not allowed in a gate body (only gate calls and barrier)",
                    stmt.tok,
                )
        return n.GateDef(
            tok, name, tuple(t.text for t in params), tuple(t.text for t in qubits), body
        )

    def name_list(self, what: str) -> list[Token]:
        names = [self.name(what)]
        while self.s.accept(","):
            names.append(self.name(what))
        seen: set[str] = set()
        for tok in names:
            if tok.text in seen:
                self.s.fail(f"{what} '{tok.text}' is declared twice", tok)
            seen.add(tok.text)
        return names

    def gate_call(self) -> n.GateCall:
        s = self.s
        start = s.peek()
        modifiers: list[n.Modifier] = []
        while True:
            tok = s.peek()
            if tok.kind != ID or tok.text not in MODIFIERS:
                break
            s.advance()
            arg: n.Expr | None = None
            if s.accept("("):
                if tok.text == "inv":
                    s.fail("'inv' takes no argument", tok)
                arg = self.expression()
                s.expect(")")
            elif tok.text == "pow":
                s.fail_expected("'(' after pow")
            s.expect("@")
            modifiers.append(n.Modifier(tok, tok.text, arg))
        name = s.peek()
        if name.kind == ID and name.text in UNSUPPORTED:
            unsupported(s, UNSUPPORTED[name.text], name)
        if name.kind != ID or (name.text in KEYWORDS and name.text != "gphase"):
            s.fail_expected("a gate name")
        s.advance()
        args: list[n.Expr] = []
        if s.accept("("):
            if not s.peek_is(")"):
                args = self.expressions()
            s.expect(")")
        if s.peek_is("["):
            unsupported(s, "durations on gate calls", s.peek())
        operands: list[n.Operand] = []
        if not s.peek_is(";") or name.text != "gphase":
            operands = self.operands()
        s.expect(";")
        return n.GateCall(start, tuple(modifiers), name, tuple(args), tuple(operands))

    def operands(self) -> list[n.Operand]:
        items = [self.operand()]
        while self.s.accept(","):
            items.append(self.operand())
        return items

    def operand(self) -> n.Operand:
        s = self.s
        tok = s.peek()
        if tok.kind == HWQ:
            unsupported(s, "physical qubits ($n)", tok)
        tok = self.name("qubit or bit operand")
        selector: n.Selector | None = None
        if s.accept("["):
            selector = self.selector()
            if s.peek_is("["):
                unsupported(s, "multi-dimensional indexing", s.peek())
        return n.Operand(tok, selector)

    def for_loop(self) -> n.For:
        s = self.s
        tok = s.advance()
        type_tok = s.peek()
        if type_tok.kind != ID or type_tok.text not in SCALAR_TYPES:
            s.fail_expected("the loop variable's type (for example 'for uint i in ...')")
        spec = self.type_spec()
        var = self.name("loop variable")
        s.expect("in")
        start = s.peek()
        over: n.RangeSpec | n.SetSpec
        if s.accept("["):
            first = None if s.peek_is(":") else self.expression()
            over = self.range_rest(start, first, "]")
            s.expect("]")
        elif s.accept("{"):
            over = n.SetSpec(start, self.expressions())
            s.expect("}")
        elif start.kind == ID:
            unsupported(s, "for over a variable (only ranges and sets)", start)
        else:
            s.fail_expected("a range '[a:b]' or a set '{...}'")
        body = self.block()
        return n.For(tok, spec, var, over, body)

    def assignment(self) -> n.Statement:
        s = self.s
        tok = s.peek()
        target = self.operand()
        op = s.peek()
        if op.kind != SYMBOL or op.text not in _ASSIGN_OPS:
            s.fail_expected("an assignment operator")
        s.advance()
        if self.word_is("measure"):
            if op.text != "=":
                s.fail("measure results are assigned with '='", op)
            s.advance()
            source = self.operand()
            s.expect(";")
            return n.Measure(tok, source, target)
        value = self.expression()
        s.expect(";")
        return n.Assign(tok, target, op.text, value)
