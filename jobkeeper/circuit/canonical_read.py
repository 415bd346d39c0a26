"""Reading canonical text back, fast.

Every job is archived as canonical text (:mod:`jobkeeper.circuit.canonical`), and the
worker parses it again before running it. The general parser pays for the whole
OpenQASM 2.0 grammar; canonical text uses a small, fixed part of it (one statement per
line, absolute indices, numbers already rounded), which one regular expression per line
reads several times faster. Measured on 2-qubit jobs: the general parser took a quarter
of the worker's time.

The rule that keeps this safe: :func:`read_canonical` returns exactly what
:func:`~jobkeeper.circuit.parser.parse_qasm` returns for the same text, or hands the
text to it. Any line it does not recognise, any gate it cannot check, any index out of
range sends the whole text to the general parser, which then gives the circuit or the
precise error. A property test holds the two to the same result.
"""

from __future__ import annotations

import re

from jobkeeper.circuit.canonical import round_param
from jobkeeper.circuit.ir import BARRIER, MEASURE, RESET, Circuit, Condition, Operation, Register
from jobkeeper.circuit.parser import MAX_REGISTER_SIZE, parse_qasm
from jobkeeper.circuit.stdgates import STANDARD_GATES
from jobkeeper.hashing import sha256_tag

_HEADER = 'OPENQASM 2.0;\ninclude "qelib1.inc";\n'
_NUMBER = r"-?\d+\.\d+(?:e[-+]\d+)?"
_QUBIT = r"q\[(\d+)\]"
# Every pattern is a sequence of bounded classes without nested repetition: linear time.
_OPAQUE = re.compile(r"opaque ([a-z][A-Za-z0-9_]*)(?:\((p0(?:,p\d+)*)\))? (a0(?:,a\d+)*);")
_QREG = re.compile(r"qreg q\[(\d+)\];")
_CREG = re.compile(r"creg c(\d+)\[(\d+)\];")
_OPERATION = re.compile(
    r"(?:if\(c(\d+)==(\d+)\) )?"
    r"(?:measure " + _QUBIT + r" -> c(\d+)\[(\d+)\]"
    r"|([a-z][A-Za-z0-9_]*)(?:\((" + _NUMBER + r"(?:," + _NUMBER + r")*)\))?"
    r" (q\[\d+\](?:,q\[\d+\])*));"
)
_INDEX = re.compile(r"\d+")
#: longest decimal index read here; anything longer goes to the general parser.
_MAX_DIGITS = 9


class _NotCanonical(Exception):
    pass


def read_canonical(text: str, *, filename: str | None = None) -> Circuit:
    """The circuit of ``text``, exactly as ``parse_qasm(text, filename=filename)`` gives
    it; fast when ``text`` is canonical text, the general parser otherwise."""
    try:
        return _read(text, filename)
    except _NotCanonical:
        return parse_qasm(text, filename=filename)


def _index(digits: str) -> int:
    if len(digits) > _MAX_DIGITS or (len(digits) > 1 and digits[0] == "0"):
        raise _NotCanonical
    return int(digits)


def _read(text: str, filename: str | None) -> Circuit:
    if not text.startswith(_HEADER) or not text.endswith("\n"):
        raise _NotCanonical
    lines = text[len(_HEADER) : -1].split("\n") if len(text) > len(_HEADER) else []
    at = 0
    opaque: dict[str, tuple[int, int]] = {}
    while at < len(lines) and lines[at].startswith("opaque "):
        match = _OPAQUE.fullmatch(lines[at])
        if match is None or match[1] in opaque or match[1] in STANDARD_GATES:
            raise _NotCanonical
        params = match[2].split(",") if match[2] else []
        qubits = match[3].split(",")
        if params != [f"p{i}" for i in range(len(params))]:
            raise _NotCanonical
        if qubits != [f"a{i}" for i in range(len(qubits))]:
            raise _NotCanonical
        opaque[match[1]] = (len(params), len(qubits))
        at += 1
    num_qubits = 0
    qregs: tuple[Register, ...] = ()
    if at < len(lines) and (match := _QREG.fullmatch(lines[at])) is not None:
        num_qubits = _index(match[1])
        if not 0 < num_qubits <= MAX_REGISTER_SIZE:
            raise _NotCanonical
        qregs = (Register("q", num_qubits, 0),)
        at += 1
    cregs: list[Register] = []
    num_clbits = 0
    while at < len(lines) and (match := _CREG.fullmatch(lines[at])) is not None:
        size = _index(match[2])
        if _index(match[1]) != len(cregs) or not 0 < size <= MAX_REGISTER_SIZE - num_clbits:
            raise _NotCanonical
        cregs.append(Register(f"c{len(cregs)}", size, num_clbits))
        num_clbits += size
        at += 1
    ops = [_operation(line, num_qubits, cregs, opaque) for line in lines[at:]]
    return Circuit(
        num_qubits=num_qubits,
        num_clbits=num_clbits,
        qregs=qregs,
        cregs=tuple(cregs),
        operations=tuple(ops),
        opaque=frozenset(opaque),
        source_hash=sha256_tag(text.encode("utf-8", "surrogatepass")),
        source_name=filename,
        opaque_signatures=tuple((name, p, q) for name, (p, q) in sorted(opaque.items())),
    )


def _operation(
    line: str, num_qubits: int, cregs: list[Register], opaque: dict[str, tuple[int, int]]
) -> Operation:
    match = _OPERATION.fullmatch(line)
    if match is None:
        raise _NotCanonical
    register, value, m_qubit, m_reg, m_bit, name, params, qubit_list = match.groups()
    condition = None
    if register is not None:
        reg = _register(cregs, register)
        condition = Condition(tuple(range(reg.offset, reg.offset + reg.size)), _index(value))
    if m_qubit is not None:
        qubit = _index(m_qubit)
        reg, bit = _register(cregs, m_reg), _index(m_bit)
        if qubit >= num_qubits or bit >= reg.size:
            raise _NotCanonical
        return Operation(MEASURE, (qubit,), (), (reg.offset + bit,), condition)
    qubits = tuple(_index(q) for q in _INDEX.findall(qubit_list))
    if any(q >= num_qubits for q in qubits) or len(set(qubits)) != len(qubits):
        raise _NotCanonical
    values = tuple(round_param(float(p)) for p in params.split(",")) if params else ()
    if name == BARRIER:
        if condition is not None or values or list(qubits) != sorted(qubits):
            raise _NotCanonical
        return Operation(BARRIER, qubits)
    if name == RESET:
        if values or len(qubits) != 1:
            raise _NotCanonical
        return Operation(RESET, qubits, (), (), condition)
    arity = opaque.get(name)
    if arity is None:
        spec = STANDARD_GATES.get(name)
        if spec is None:
            raise _NotCanonical
        arity = (spec.num_params, spec.num_qubits)
    if arity != (len(values), len(qubits)):
        raise _NotCanonical
    return Operation(name, qubits, values, (), condition)


def _register(cregs: list[Register], digits: str) -> Register:
    k = _index(digits)
    if k >= len(cregs):
        raise _NotCanonical
    return cregs[k]
