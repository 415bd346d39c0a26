"""Gate definitions (``gate`` and ``opaque``) as data, and the parser for their text.

Shared by the standard header (:mod:`jobkeeper.circuit.stdgates`) and user programs
(:mod:`jobkeeper.circuit.parser`), so both follow the same rules: a body holds only
``U``, ``CX``, calls of gates defined earlier, and ``barrier``, all on the gate's own
qubit arguments (arXiv:1707.03429, section 3.1 and the grammar's ``goplist``).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from jobkeeper.circuit.expressions import Expr, parse_expression
from jobkeeper.circuit.lexer import ID, Token, TokenStream

#: Expansion costs are capped here so that deeply composed gates do not make huge ints.
COST_CAP = 1 << 62

#: Words that cannot name a register, gate or parameter.
RESERVED = frozenset(
    {
        "OPENQASM",
        "include",
        "qreg",
        "creg",
        "gate",
        "opaque",
        "barrier",
        "measure",
        "reset",
        "if",
        "U",
        "CX",
        "pi",
        "sin",
        "cos",
        "tan",
        "exp",
        "ln",
        "sqrt",
    }
)


@dataclass(frozen=True, slots=True)
class BodyOp:
    """One statement of a gate body. ``name`` is ``U``, ``CX``, ``barrier`` or a gate's
    name; ``target`` is that gate's definition; ``qubits`` are positions in the enclosing
    gate's qubit arguments."""

    name: str
    target: GateSpec | None
    qubits: tuple[int, ...]
    params: tuple[Expr, ...]


@dataclass(frozen=True, slots=True)
class GateSpec:
    """A gate: its parameter names, its qubit argument names and its body (None for an
    ``opaque`` gate). ``cost`` bounds the work of expanding one call of it into the IR."""

    name: str
    params: tuple[str, ...]
    qubit_args: tuple[str, ...]
    body: tuple[BodyOp, ...] | None
    standard: bool = False
    extension: bool = False
    line: int = 0
    cost: int = 1

    @property
    def num_qubits(self) -> int:
        return len(self.qubit_args)

    @property
    def num_params(self) -> int:
        return len(self.params)

    @property
    def opaque(self) -> bool:
        return self.body is None


def _is_leaf(target: GateSpec | None) -> bool:
    return target is None or target.standard or target.opaque


def _name_list(stream: TokenStream, what: str) -> list[Token]:
    names = [stream.expect_kind(ID, what)]
    while stream.accept(","):
        names.append(stream.expect_kind(ID, what))
    seen: set[str] = set()
    for tok in names:
        if tok.text in RESERVED:
            stream.fail(f"'{tok.text}' is a reserved word and cannot name a {what}", tok)
        if tok.text in seen:
            stream.fail(f"{what} '{tok.text}' is declared twice", tok)
        seen.add(tok.text)
    return names


def parse_gate_definition(
    stream: TokenStream,
    keyword: Token,
    lookup: Callable[[Token], GateSpec],
    *,
    standard: bool = False,
    extension: bool = False,
) -> GateSpec:
    """Parse what follows ``gate`` or ``opaque`` (``keyword``). ``lookup`` resolves a
    called gate's name or raises CircuitError (a gate must be defined before use, so a
    definition can never call itself)."""
    name_tok = stream.expect_kind(ID, "a gate name")
    if name_tok.text in RESERVED:
        stream.fail(f"'{name_tok.text}' is a reserved word and cannot name a gate", name_tok)
    param_names: list[Token] = []
    if stream.accept("("):
        if not stream.peek_is(")"):
            param_names = _name_list(stream, "parameter")
        stream.expect(")")
    qubit_names = _name_list(stream, "qubit argument")
    params = {tok.text: i for i, tok in enumerate(param_names)}
    qubits = {tok.text: i for i, tok in enumerate(qubit_names)}
    for tok in qubit_names:
        if tok.text in params:
            stream.fail(f"'{tok.text}' names both a parameter and a qubit argument", tok)
    body: tuple[BodyOp, ...] | None = None
    cost = 1
    if keyword.text == "opaque":
        stream.expect(";")
    else:
        stream.expect("{")
        ops: list[BodyOp] = []
        while not stream.accept("}"):
            op = _body_statement(stream, params, qubits, lookup)
            ops.append(op)
            cost += 1 + len(op.qubits) + sum(p.size for p in op.params)
            if not _is_leaf(op.target):
                assert op.target is not None
                cost += op.target.cost
            cost = min(cost, COST_CAP)
        body = tuple(ops)
    return GateSpec(
        name=name_tok.text,
        params=tuple(tok.text for tok in param_names),
        qubit_args=tuple(tok.text for tok in qubit_names),
        body=body,
        standard=standard,
        extension=extension,
        line=name_tok.line,
        cost=cost,
    )


def _body_statement(
    stream: TokenStream,
    params: dict[str, int],
    qubits: dict[str, int],
    lookup: Callable[[Token], GateSpec],
) -> BodyOp:
    tok = stream.peek()
    if tok.kind != ID:
        stream.fail_expected("a gate call, 'barrier' or '}' in the gate body")
    if tok.text in ("measure", "reset", "if", "qreg", "creg", "gate", "opaque", "include"):
        stream.fail(
            f"'{tok.text}' is not allowed in a gate body (only gate calls and barrier)", tok
        )
    stream.advance()
    exprs: list[Expr] = []
    if tok.text != "barrier" and stream.accept("("):
        if not stream.peek_is(")"):
            exprs.append(parse_expression(stream, params))
            while stream.accept(","):
                exprs.append(parse_expression(stream, params))
        stream.expect(")")
    args: list[int] = []
    seen: set[int] = set()
    while True:
        arg = stream.expect_kind(ID, "a qubit argument of the gate")
        if arg.text not in qubits:
            stream.fail(f"'{arg.text}' is not a qubit argument of this gate", arg)
        if stream.peek_is("["):
            stream.fail("gate bodies use the gate's qubit arguments, not indexed qubits", arg)
        if qubits[arg.text] in seen:
            if tok.text == "barrier":
                stream.fail(f"qubit argument '{arg.text}' appears twice in the barrier", arg)
            stream.fail(f"qubit argument '{arg.text}' is used twice in one gate call", arg)
        args.append(qubits[arg.text])
        seen.add(qubits[arg.text])
        if not stream.accept(","):
            break
    stream.expect(";")
    target: GateSpec | None = None
    if tok.text == "U":
        want_params, want_qubits = 3, 1
    elif tok.text == "CX":
        want_params, want_qubits = 0, 2
    elif tok.text == "barrier":
        want_params, want_qubits = 0, len(args)
    else:
        target = lookup(tok)
        want_params, want_qubits = target.num_params, target.num_qubits
    check_arity(stream, tok, len(exprs), want_params, len(args), want_qubits)
    return BodyOp(tok.text, target, tuple(args), tuple(exprs))


def check_arity(
    stream: TokenStream,
    tok: Token,
    n_params: int,
    want_params: int,
    n_qubits: int,
    want_qubits: int,
) -> None:
    if n_params != want_params:
        stream.fail(f"gate '{tok.text}' takes {want_params} parameter(s), {n_params} given", tok)
    if n_qubits != want_qubits:
        stream.fail(f"gate '{tok.text}' takes {want_qubits} qubit(s), {n_qubits} given", tok)
