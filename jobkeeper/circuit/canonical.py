"""Canonical text and hash of a circuit (DESIGN §4 "Circuits").

The canonical text is OpenQASM 2.0 that :func:`jobkeeper.circuit.parser.parse_qasm`
reads back into an equal circuit: one ``qreg q[N]``, the classical registers in
declaration order as ``c0, c1, ...`` with their sizes (they decide how count bit strings
are written), the opaque declarations sorted by name, then one operation per line on
absolute indices.

Numbers: parameters are rounded to 12 significant digits (the parser already stores them
so; see :func:`round_param`) and written as Python's ``.12g`` with a decimal point always
present (``3.0``, ``1.5707963268``, ``1.0e-05``): OpenQASM 2.0 reals need the point
(arXiv:1707.03429, grammar ``real``), and -0.0 is written as ``0.0``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from jobkeeper.circuit.ir import BARRIER, MEASURE, RESET, Circuit, Operation
from jobkeeper.circuit.stdgates import STANDARD_GATES
from jobkeeper.exceptions import CircuitError
from jobkeeper.hashing import sha256_tag

SIGNIFICANT_DIGITS = 12


def round_param(value: float) -> float:
    """``value`` rounded to 12 significant digits; -0.0 becomes 0.0. Twelve digits keep
    every angle far below any device's precision, and absorb the float noise by which
    ``pi/2`` and ``1.5707963267948966`` (or ``3*pi/8`` and ``pi*3/8``) differ."""
    if not math.isfinite(value):
        raise CircuitError(f"parameter {value!r} is not a finite number")
    rounded = float(f"{value:.{SIGNIFICANT_DIGITS}g}")
    return 0.0 if rounded == 0 else rounded


def format_param(value: float) -> str:
    return format_rounded(round_param(value))


def format_rounded(value: float) -> str:
    """The canonical writing of a parameter already rounded by :func:`round_param`
    (rounding again would change nothing: twelve digits of a twelve-digit number)."""
    text = f"{value:.{SIGNIFICANT_DIGITS}g}"
    mantissa, e, exponent = text.partition("e")
    if "." not in mantissa:
        mantissa += ".0"
    return mantissa + e + exponent


class CanonicalWriter:
    """The canonical text of circuits with one circuit's registers and opaque gates: the
    header lines once, then one line per operation. A template's bound points share
    their registers, so a sweep writes the header once and only the lines whose
    parameters change per point (:mod:`jobkeeper.circuit.qasm3.compiled`)."""

    __slots__ = ("_circuit", "_names", "_signatures", "header")

    def __init__(self, circuit: Circuit):
        lines = ["OPENQASM 2.0;", 'include "qelib1.inc";']
        signatures = {name: (0, 1) for name in circuit.opaque}
        for op in circuit.operations:
            if op.name in signatures:
                signatures[op.name] = (len(op.params), len(op.qubits))
        for name, n_params, n_qubits in circuit.opaque_signatures:
            signatures[name] = (n_params, n_qubits)
        for name in sorted(signatures):
            n_params, n_qubits = signatures[name]
            params = f"({','.join(f'p{i}' for i in range(n_params))})" if n_params else ""
            lines.append(f"opaque {name}{params} {','.join(f'a{i}' for i in range(n_qubits))};")
        if circuit.num_qubits:
            lines.append(f"qreg q[{circuit.num_qubits}];")
        lines += [f"creg c{k}[{reg.size}];" for k, reg in enumerate(circuit.cregs)]
        self._circuit = circuit
        self._names = register_names(circuit)
        self._signatures = signatures
        #: the lines before the operations.
        self.header = tuple(lines)

    def line(self, op: Operation) -> str:
        """The canonical line of one operation of the circuit."""
        return operation_line(self._circuit, op, self._names, self._signatures)


def canonical_text(circuit: Circuit) -> str:
    """The canonical OpenQASM 2.0 text of ``circuit`` (see the module docstring)."""
    writer = CanonicalWriter(circuit)
    lines = list(writer.header)
    lines.extend(writer.line(op) for op in circuit.operations)
    return "\n".join(lines) + "\n"


def register_names(circuit: Circuit) -> tuple[dict[int, str], dict[tuple[int, ...], str]]:
    """The classical registers named ``c0, c1, ...`` in declaration order: each bit's
    name (``c1[0]``) and each register's (by its bits)."""
    bit_names: dict[int, str] = {}
    register_of: dict[tuple[int, ...], str] = {}
    for k, reg in enumerate(circuit.cregs):
        bits = tuple(range(reg.offset, reg.offset + reg.size))
        register_of[bits] = f"c{k}"
        bit_names.update({bit: f"c{k}[{j}]" for j, bit in enumerate(bits)})
    return bit_names, register_of


def circuit_hash(circuit: Circuit) -> str:
    """``sha256:`` + hex of the UTF-8 canonical text."""
    return sha256_tag(canonical_text(circuit).encode("utf-8"))


@dataclass(frozen=True)
class Spelling:
    """How a language writes what OpenQASM 2.0 and 3 share: the separator of operands
    and parameters, a condition on a whole register, a measurement."""

    comma: str = ","
    condition: str = "if({register}=={value}) "
    measure: str = "measure {qubit} -> {bit};"


OPENQASM2 = Spelling()


def operation_line(
    circuit: Circuit,
    op: Operation,
    names: tuple[dict[int, str], dict[tuple[int, ...], str]],
    opaque: dict[str, tuple[int, int]],
    spelling: Spelling = OPENQASM2,
) -> str:
    """One operation as a statement on absolute indices (``names``: those of
    :func:`register_names`); CircuitError for one that cannot be written."""
    bit_names, register_of = names
    for qubit in op.qubits:
        if not 0 <= qubit < circuit.num_qubits:
            raise CircuitError(f"operation '{op.name}' uses qubit {qubit} outside the circuit")
    qubits = spelling.comma.join(f"q[{q}]" for q in op.qubits)
    if op.name == BARRIER:
        if not op.qubits:
            raise CircuitError("a barrier needs at least one qubit")
        # A condition on a barrier cannot be written in OpenQASM 2.0 and means nothing.
        return f"barrier {qubits};"
    prefix = ""
    if op.condition is not None:
        register = register_of.get(op.condition.clbits)
        if register is None:
            raise CircuitError("a condition must test one whole classical register")
        prefix = spelling.condition.format(register=register, value=op.condition.value)
    if op.name == MEASURE:
        if len(op.qubits) != 1 or len(op.clbits) != 1 or op.clbits[0] not in bit_names:
            raise CircuitError("a measurement takes one qubit and one declared bit")
        return prefix + spelling.measure.format(qubit=qubits, bit=bit_names[op.clbits[0]])
    if op.name == RESET:
        return f"{prefix}reset {qubits};"
    spec = STANDARD_GATES.get(op.name)
    if op.name in opaque:
        arity = opaque[op.name]
    elif spec is not None:
        arity = (spec.num_params, spec.num_qubits)
    else:
        raise CircuitError(f"operation '{op.name}' is neither a standard gate nor opaque")
    if arity != (len(op.params), len(op.qubits)):
        raise CircuitError(f"operation '{op.name}' has the wrong number of arguments")
    params = spelling.comma.join(format_param(p) for p in op.params)
    return f"{prefix}{op.name}({params}) {qubits};" if params else f"{prefix}{op.name} {qubits};"
