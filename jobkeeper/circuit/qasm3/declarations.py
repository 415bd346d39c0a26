"""Declarations: the standard library include, inputs, qubit and bit registers, gates."""

from __future__ import annotations

from jobkeeper.circuit.ir import Register
from jobkeeper.circuit.qasm3 import nodes as n
from jobkeeper.circuit.qasm3.state import State, Var
from jobkeeper.circuit.qasm3.stdlib import STANDARD_LIBRARY
from jobkeeper.circuit.qasm3.values import CONSTANTS, number

MAX_REGISTER_SIZE = 1 << 24
INPUT_TYPES = frozenset({"float", "angle", "int", "uint", "bool"})


def include(interp: State, stmt: n.Include) -> None:
    if stmt.path == "stdgates.inc":
        interp.global_only("include", stmt.tok)
        for name, gate in STANDARD_LIBRARY.items():
            if name in interp.gates and interp.gates[name] is not gate:
                interp.fail(f"stdgates.inc defines '{name}', which this program defined", stmt.tok)
            interp.gates[name] = gate
        return
    if stmt.path == "qelib1.inc":
        interp.fail(
            'qelib1.inc is the OpenQASM 2.0 library; start the program with "OPENQASM 2.0;" '
            'to read it as OpenQASM 2.0 (in OpenQASM 3, include "stdgates.inc")',
            stmt.tok,
        )
    interp.unsupported(f'include "{stmt.path}" (only "stdgates.inc")', stmt.tok)


def input_declaration(interp: State, stmt: n.InputDecl) -> None:
    interp.global_only("input", stmt.tok)
    name = stmt.name.text
    if stmt.type.name not in INPUT_TYPES:
        interp.unsupported(f"input of type {stmt.type.name}", stmt.type.tok)
    if name not in interp.bindings:
        interp.fail(f"input '{name}' has no value (bind it)", stmt.name)
    width = None if stmt.type.size is None else interp.size(stmt.type.size)
    if stmt.type.name in ("float", "angle"):
        width = None
    value = interp.coerce(stmt.type.name, width, interp.bindings[name], stmt.name)
    interp.declare(stmt.name, Var(stmt.type.name, width, value, const=True, input=True))


def register(interp: State, stmt: n.QubitDecl | n.BitDecl) -> None:
    interp.global_only("qubit and bit declarations", stmt.tok)
    name = stmt.name
    size = 1 if stmt.size is None else interp.size(stmt.size)
    if name.text in interp.scopes[0] or name.text in interp.qregs or name.text in interp.cregs:
        interp.fail(f"'{name.text}' is already declared", name)
    if name.text in CONSTANTS:
        interp.fail(f"'{name.text}' is a built-in constant", name)
    if isinstance(stmt, n.QubitDecl):
        if interp.num_qubits + size > MAX_REGISTER_SIZE:
            interp.fail(f"more than {MAX_REGISTER_SIZE} qubits in total", name)
        interp.qregs[name.text] = (
            Register(name.text, size, interp.num_qubits),
            stmt.size is not None,
        )
        interp.num_qubits += size
        return
    if stmt.init is not None and number(interp.evaluate(stmt.init)) != 0:
        interp.unsupported("a bit register's initial value other than 0", stmt.init.tok)
    if interp.num_clbits + size > MAX_REGISTER_SIZE:
        interp.fail(f"more than {MAX_REGISTER_SIZE} bits in total", name)
    interp.cregs[name.text] = (Register(name.text, size, interp.num_clbits), stmt.size is not None)
    interp.num_clbits += size


def define_gate(interp: State, stmt: n.GateDef) -> None:
    interp.global_only("gate definitions", stmt.tok)
    name = stmt.name
    if name.text in interp.gates or name.text in ("U", "gphase"):
        interp.fail(f"gate '{name.text}' is already defined", name)
    qubits = set(stmt.qubits)
    for op in stmt.body:
        assert isinstance(op, n.GateCall | n.Barrier)
        for operand in op.operands:
            if operand.tok.text not in qubits:
                interp.fail(
                    f"'{operand.tok.text}' is not a qubit argument of this gate", operand.tok
                )
            if operand.selector is not None:
                interp.fail(
                    "gate bodies use the gate's qubit arguments, not indexed qubits",
                    operand.tok,
                )
        if isinstance(op, n.GateCall):
            interp.lookup_gate(op.name)  # defined before use: no gate can call itself
    interp.gates[name.text] = stmt
