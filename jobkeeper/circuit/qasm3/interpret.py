"""Runs a syntax tree (:mod:`.nodes`) into a :class:`~jobkeeper.circuit.ir.Circuit`.

Classical values are computed as the program is read: loops are unrolled, ``if`` on
known values picks its branch, gate calls are resolved (:mod:`.modifiers`). An ``if`` on
measured bits becomes the IR's existing conditioning, ``Condition(bits, value)`` on one
whole bit register, which the simulators already branch on exactly: the condition is
evaluated for every value the register can hold, and each operation of the branch is
emitted once per value that makes it true (one copy runs at most, the values being
exclusive). ``else`` takes the other values. So ``if (c[0]) x q;`` on a ``bit[2] c``
is ``if(c==1) x q; if(c==3) x q;``. A branch may not measure into the register its
condition reads (the copies would then stop being exclusive).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import NoReturn

from jobkeeper.circuit.ir import BARRIER, MEASURE, RESET, Circuit, Operation, Register
from jobkeeper.circuit.lexer import Token
from jobkeeper.circuit.qasm3 import nodes as n
from jobkeeper.circuit.qasm3.conditions import emit, runtime_if
from jobkeeper.circuit.qasm3.declarations import (
    MAX_REGISTER_SIZE,
    define_gate,
    include,
    input_declaration,
    register,
)
from jobkeeper.circuit.qasm3.modifiers import Call, Expander, Gate
from jobkeeper.circuit.qasm3.sinks import OperationSink
from jobkeeper.circuit.qasm3.state import Var
from jobkeeper.circuit.qasm3.stdlib import STANDARD_LIBRARY
from jobkeeper.circuit.qasm3.values import CONSTANTS, Bits, Evaluator, Value, number, truthy, wrap
from jobkeeper.exceptions import CircuitError

MAX_WORK = 8_000_000
#: Units charged per statement run and per loop iteration: running a statement costs
#: several times what emitting one operation does, and refusing a runaway program must
#: come in seconds.
STEP_COST = 8


class _Runtime(Exception):
    """A compile-time evaluation read a measured register."""


class Interpreter:
    #: where gate calls put their operations (a subclass may record more).
    sink_type: type[OperationSink] = OperationSink

    def __init__(self, file: str | None, bindings: Mapping[str, float]) -> None:
        self.file = file
        self.bindings = bindings
        self.qregs: dict[str, tuple[Register, bool]] = {}
        self.cregs: dict[str, tuple[Register, bool]] = {}
        self.num_qubits = 0
        self.num_clbits = 0
        self.scopes: list[dict[str, Var]] = [{}]
        self.gates: dict[str, n.GateDef] = {}
        self.ops: list[Operation] = []
        self.work = 0
        self.condition: tuple[Register, frozenset[int]] | None = None
        self.runtime_bits: dict[str, int] | None = None  # register values while enumerating
        self.expander = Expander(
            self.lookup_gate, self.gate_scope_value, self.is_standard, self.fail, self.charge
        )
        self.evaluator = Evaluator(self.resolve, self.fail, self.size, self.width_of)

    # ---- plumbing --------------------------------------------------------------------

    def fail(self, message: str, tok: Token) -> NoReturn:
        raise CircuitError(message, file=self.file, line=tok.line, column=tok.column)

    def unsupported(self, feature: str, tok: Token) -> NoReturn:
        self.fail(f"{feature} is not supported", tok)

    def charge(self, units: int) -> None:
        self.work += units
        if self.work > MAX_WORK:
            raise CircuitError(
                f"program too large: it expands to more than {MAX_WORK} units of work "
                "(operations, operands and loop iterations)",
                file=self.file,
            )

    def circuit(self) -> Circuit:
        return Circuit(
            num_qubits=self.num_qubits,
            num_clbits=self.num_clbits,
            qregs=tuple(r for r, _ in self.qregs.values()),
            cregs=tuple(r for r, _ in self.cregs.values()),
            operations=tuple(self.ops),
        )

    def run(self, body: Iterable[n.Statement]) -> None:
        for stmt in body:
            self.charge(STEP_COST)
            self.statement(stmt)

    def size(self, expr: n.Expr) -> int:
        value = self.evaluator.integer(self.evaluate(expr), expr.tok)
        if not 0 < value <= MAX_REGISTER_SIZE:
            self.fail(f"size must be between 1 and {MAX_REGISTER_SIZE}", expr.tok)
        return value

    def evaluate(self, expr: n.Expr) -> Value:
        try:
            return self.evaluator(expr)
        except _Runtime:
            self.fail("measured bits can be read only in an if condition", expr.tok)

    def number_of(self, expr: n.Expr) -> float:
        return float(number(self.evaluate(expr)))

    def resolve(self, tok: Token) -> Value:
        name = tok.text
        for scope in reversed(self.scopes):
            if name in scope:
                return scope[name].value
        if name in self.cregs:
            if self.runtime_bits is None or name not in self.runtime_bits:
                raise _Runtime
            reg, _ = self.cregs[name]
            return Bits(self.runtime_bits[name], reg.size)
        if name in self.qregs:
            self.fail(f"'{name}' is a qubit register, not a classical value", tok)
        self.fail(f"unknown name '{name}'", tok)

    def width_of(self, tok: Token) -> int | None:
        for scope in reversed(self.scopes):
            if tok.text in scope:
                var = scope[tok.text]
                return var.width if var.type in ("int", "uint") else None
        return None

    def declare(self, tok: Token, var: Var) -> None:
        name = tok.text
        if name in CONSTANTS:
            self.fail(f"'{name}' is a built-in constant", tok)
        if name in self.scopes[-1] or (
            len(self.scopes) == 1 and (name in self.qregs or name in self.cregs)
        ):
            self.fail(f"'{name}' is already declared", tok)
        self.scopes[-1][name] = var

    def global_only(self, what: str, tok: Token) -> None:
        if len(self.scopes) > 1 or self.condition is not None:
            self.unsupported(f"{what} inside a block", tok)

    def coerce(self, type_name: str, width: int | None, value: Value, tok: Token) -> Value:
        if type_name == "bool":
            return truthy(value)
        if type_name in ("float", "angle"):
            return float(number(value))
        x = number(value)
        if isinstance(x, float):
            self.fail(f"cannot store the float {x!r} in {type_name} (use a cast)", tok)
        if width is not None:
            return wrap(x, width, signed=type_name == "int")
        if type_name == "uint" and x < 0:
            self.fail("a negative value cannot be a uint", tok)
        return x

    # ---- statements ------------------------------------------------------------------

    def statement(self, stmt: n.Statement) -> None:
        if isinstance(stmt, n.GateCall):
            self.gate_call(stmt)
        elif isinstance(stmt, n.Measure):
            self.measure(stmt)
        elif isinstance(stmt, n.If):
            self.if_statement(stmt)
        elif isinstance(stmt, n.For):
            self.for_loop(stmt)
        elif isinstance(stmt, n.Reset):
            for operand in stmt.operands:
                qubits, _ = self.qubits_of(operand)
                self.charge(2 * len(qubits))
                emit(self, [Operation(RESET, (q,)) for q in qubits])
        elif isinstance(stmt, n.Barrier):
            qubits = []
            for operand in stmt.operands:
                qubits.extend(self.qubits_of(operand)[0])
            if not stmt.operands:
                qubits = list(range(self.num_qubits))
            if qubits:
                self.charge(1 + len(qubits))
                self.ops.append(Operation(BARRIER, tuple(sorted(set(qubits)))))
        elif isinstance(stmt, n.Assign):
            self.assign(stmt)
        elif isinstance(stmt, n.VarDecl):
            width = None if stmt.type.size is None else self.size(stmt.type.size)
            value: Value = 0 if stmt.init is None else self.evaluate(stmt.init)
            value = self.coerce(stmt.type.name, width, value, stmt.name)
            self.declare(stmt.name, Var(stmt.type.name, width, value, stmt.const))
        elif isinstance(stmt, n.InputDecl):
            input_declaration(self, stmt)
        elif isinstance(stmt, n.QubitDecl | n.BitDecl):
            register(self, stmt)
        elif isinstance(stmt, n.GateDef):
            define_gate(self, stmt)
        elif isinstance(stmt, n.Include):
            include(self, stmt)
        else:  # pragma: no cover - the parser makes no other statements
            raise AssertionError(stmt)

    def assign(self, stmt: n.Assign) -> None:
        name = stmt.target.tok
        if name.text in self.cregs:
            self.unsupported("assigning to bits other than by measure", stmt.tok)
        if stmt.target.selector is not None:
            self.unsupported("assigning to part of a variable", stmt.tok)
        for scope in reversed(self.scopes):
            if name.text in scope:
                var = scope[name.text]
                break
        else:
            self.fail(f"unknown name '{name.text}'", name)
        if var.const:
            self.fail(f"'{name.text}' is {'an input' if var.input else 'const'}", name)
        value = self.evaluate(stmt.value)
        if stmt.op != "=":
            op_tok = stmt.tok._replace(text=stmt.op[:-1])
            value = (
                self.evaluator.power(op_tok, var.value, value)
                if stmt.op == "**="
                else self.evaluator.binary(op_tok, var.value, value)
            )
        var.value = self.coerce(var.type, var.width, value, name)

    def for_loop(self, stmt: n.For) -> None:
        over = stmt.over
        values: Iterable[Value]
        if isinstance(over, n.SetSpec):
            values = [self.evaluate(item) for item in over.items]
        else:
            if over.start is None or over.stop is None:
                self.fail("a loop range needs a start and an end", over.tok)
            start = self.evaluator.integer(self.evaluate(over.start), over.tok)
            stop = self.evaluator.integer(self.evaluate(over.stop), over.tok)
            step = (
                1
                if over.step is None
                else self.evaluator.integer(self.evaluate(over.step), over.tok)
            )
            if step == 0:
                self.fail("a range's step cannot be 0", over.tok)
            # Inclusive of the end, as the specification's ranges are (classical.rst).
            values = range(start, stop + (1 if step > 0 else -1), step)
        width = None if stmt.type.size is None else self.size(stmt.type.size)
        for value in values:
            self.charge(STEP_COST)
            self.scopes.append({})
            try:
                coerced = self.coerce(stmt.type.name, width, value, stmt.var)
                self.declare(stmt.var, Var(stmt.type.name, width, coerced, const=False))
                self.run(stmt.body)
            finally:
                self.scopes.pop()

    def block(self, body: tuple[n.Statement, ...]) -> None:
        self.scopes.append({})
        try:
            self.run(body)
        finally:
            self.scopes.pop()

    # ---- if ----------------------------------------------------------------------------

    def if_statement(self, stmt: n.If) -> None:
        try:
            value = self.evaluator(stmt.condition)
        except _Runtime:
            runtime_if(self, stmt)
            return
        if truthy(value):
            self.block(stmt.then)
        elif stmt.otherwise is not None:
            self.block(stmt.otherwise)

    def measure(self, stmt: n.Measure) -> None:
        qubits, _ = self.qubits_of(stmt.source)
        if stmt.target is None:
            self.unsupported("measure without a target bit", stmt.tok)
        bits, _ = self.bits_of(stmt.target)
        if len(qubits) != len(bits):
            self.fail(f"measure of {len(qubits)} qubit(s) into {len(bits)} bit(s)", stmt.target.tok)
        if self.condition is not None:
            reg = self.condition[0]
            if any(reg.offset <= b < reg.offset + reg.size for b in bits):
                self.unsupported("measuring into a bit the enclosing if reads", stmt.tok)
        self.charge(3 * len(qubits))
        emit(self, [Operation(MEASURE, (q,), (), (b,)) for q, b in zip(qubits, bits, strict=True)])

    def qubits_of(self, operand: n.Operand) -> tuple[list[int], bool]:
        tok = operand.tok
        if tok.text not in self.qregs:
            if tok.text in self.cregs:
                self.fail(f"'{tok.text}' is a bit register; expected qubits", tok)
            self.fail(f"undeclared qubit register '{tok.text}'", tok)
        reg, is_register = self.qregs[tok.text]
        return self.select(reg, is_register, operand)

    def bits_of(self, operand: n.Operand) -> tuple[list[int], bool]:
        tok = operand.tok
        if tok.text not in self.cregs:
            if tok.text in self.qregs:
                self.fail(f"'{tok.text}' is a qubit register; expected bits", tok)
            self.fail(f"undeclared bit register '{tok.text}'", tok)
        reg, is_register = self.cregs[tok.text]
        return self.select(reg, is_register, operand)

    def select(
        self, reg: Register, is_register: bool, operand: n.Operand
    ) -> tuple[list[int], bool]:
        sel = operand.selector
        if sel is None:
            return list(range(reg.offset, reg.offset + reg.size)), is_register
        if isinstance(sel, n.Expr):
            i = self.evaluator.integer(self.evaluate(sel), sel.tok)
            if not -reg.size <= i < reg.size:
                self.fail(f"index {i} out of range for {reg.name}[{reg.size}]", sel.tok)
            return [reg.offset + (i % reg.size)], False
        return [reg.offset + p for p in self.evaluator.selection(sel, reg.size)], True

    def gate_call(self, stmt: n.GateCall) -> None:
        gate = self.lookup_gate(stmt.name)
        mods = [
            (m.kind, 1.0 if m.arg is None else self.number_of(m.arg), m.tok) for m in stmt.modifiers
        ]
        values = tuple(self.number_of(arg) for arg in stmt.args)
        args = [self.qubits_of(o) for o in stmt.operands]
        self.expander.check(stmt, gate, mods, len(values), len(args))
        sizes = {len(q) for q, is_reg in args if is_reg}
        if len(sizes) > 1:
            self.fail(f"register sizes differ in broadcast of '{stmt.name.text}'", stmt.name)
        count = sizes.pop() if sizes else 1
        out: list[Operation] = []
        sink = self.sink_type(out, self.charge)
        for i in range(count):
            qubits = tuple(q[i] if is_reg else q[0] for q, is_reg in args)
            if len(set(qubits)) != len(qubits):
                self.fail(
                    f"the same qubit appears twice in a call of '{stmt.name.text}'", stmt.name
                )
            self.expander.apply(sink, mods, Call(gate, values, qubits, (), False, stmt.tok))
        emit(self, out)

    # ---- gates -------------------------------------------------------------------------

    def lookup_gate(self, tok: Token) -> Gate:
        name = tok.text
        if name in ("U", "gphase"):
            return name
        if name in self.gates:
            return self.gates[name]
        hint = ' (include "stdgates.inc" defines it)' if name in STANDARD_LIBRARY else ""
        self.fail(f"undefined gate '{name}'{hint}", tok)

    def is_standard(self, gate: n.GateDef) -> bool:
        return STANDARD_LIBRARY.get(gate.name.text) is gate

    def gate_scope_value(self, expr: n.Expr, scope: dict[str, float]) -> float:
        """A parameter expression inside a gate body: the gate's parameters, then the
        program's constants and inputs."""
        saved = self.scopes
        self.scopes = [
            self.const_globals(),
            {k: Var("float", None, v, True) for k, v in scope.items()},
        ]
        try:
            return self.number_of(expr)
        finally:
            self.scopes = saved

    def const_globals(self) -> dict[str, Var]:
        return {k: v for k, v in self.scopes[0].items() if v.const}
