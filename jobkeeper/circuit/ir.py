"""The circuit intermediate representation every other part of jobkeeper works on.

A :class:`Circuit` is what the OpenQASM 2.0 parser produces: registers flattened to
absolute qubit and bit indices, user-defined gates inlined down to the standard gate set
(the gates of ``qelib1.inc`` plus the later widely used additions, see
:mod:`jobkeeper.circuit.stdgates`), and parameters evaluated to floats.

These are plain frozen dataclasses: simulators walk them in hot loops.
"""

from __future__ import annotations

from dataclasses import dataclass, field

#: Operation names that are not unitary gates.
MEASURE = "measure"
RESET = "reset"
BARRIER = "barrier"
NON_GATE_OPERATIONS = frozenset({MEASURE, RESET, BARRIER})


@dataclass(frozen=True, slots=True)
class Register:
    """A declared register: its name, size and the absolute index of its element 0."""

    name: str
    size: int
    offset: int


@dataclass(frozen=True, slots=True)
class Condition:
    """``if(creg==value)``: ``clbits`` are the register's absolute bit indices, element 0
    being the register's bit 0 (its least significant bit)."""

    clbits: tuple[int, ...]
    value: int


@dataclass(frozen=True, slots=True)
class Operation:
    """One operation on absolute indices.

    ``name`` is a standard gate name (``h``, ``cx``, ``u3``, ...), an opaque gate's name,
    or one of ``measure``, ``reset``, ``barrier``. For ``measure``, ``qubits`` holds the
    measured qubit and ``clbits`` the bit written.
    """

    name: str
    qubits: tuple[int, ...]
    params: tuple[float, ...] = ()
    clbits: tuple[int, ...] = ()
    condition: Condition | None = None


@dataclass(frozen=True, slots=True)
class Circuit:
    """A parsed circuit. ``qregs``/``cregs`` keep the declaration order (it decides how
    bit strings of counts are written); ``opaque`` names the declared opaque gates."""

    num_qubits: int
    num_clbits: int
    qregs: tuple[Register, ...]
    cregs: tuple[Register, ...]
    operations: tuple[Operation, ...]
    opaque: frozenset[str] = field(default_factory=frozenset)
    #: ``sha256:<hex>`` of the source text as given (None when built in code).
    source_hash: str | None = None
    #: the file name the circuit came from, for messages only.
    source_name: str | None = None
    #: ``(name, number of parameters, number of qubits)`` of each opaque gate, sorted by
    #: name: an opaque gate that is declared but never called still has a signature.
    opaque_signatures: tuple[tuple[str, int, int], ...] = ()
