"""Binding a template fast: trace once (:mod:`.trace`), then evaluate per point.

A template's ``float``/``angle`` inputs are traced symbolically; its other inputs
(``int``, ``uint``, ``bool``) may steer loops and conditions, so each of their value
combinations gets its own trace (a :class:`Shape`). A shape is the circuit with its
input-dependent parameters left open, one generated Python function that computes them
all from the inputs (the tape's lines, in order), and the canonical lines of every
operation that does not change. Binding a point is then: call the function, round each
parameter to 12 significant digits (:func:`~jobkeeper.circuit.canonical.round_param`,
as every reader does), and fill the open operations.

The rule that keeps this safe: a bound point is exactly the circuit the interpreter gives
for the same values. The function repeats the interpreter's float operations on the
same operands (bit-identical results); any value the interpreter would have refused
(non-finite, division by zero, no real value), any intermediate that is not finite, and
any template that does not trace sends the point to the interpreter, which then gives
the circuit or the precise error. Property tests hold the two to the same circuit.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from jobkeeper.circuit.canonical import CanonicalWriter, format_rounded, round_param
from jobkeeper.circuit.ir import Circuit, Operation
from jobkeeper.circuit.qasm3 import nodes as n
from jobkeeper.circuit.qasm3.trace import Sym, Tape, TracingInterpreter

#: input types traced symbolically; the others select a shape by their values.
SYMBOLIC_TYPES = frozenset({"float", "angle"})
#: shapes kept per template (one per combination of integer and bool inputs).
MAX_SHAPES = 64
#: temporaries summed per line of the finiteness check (short lines keep Python's
#: compiler far from its nesting limits).
_CHECK_CHUNK = 32


class Unbindable(Exception):
    """This point must be bound by the interpreter (it gives the circuit or the error)."""


@dataclass(frozen=True, slots=True)
class Open:
    """An operation with input-dependent parameters: its index, the operation as traced,
    per parameter the slot of the computed values (None: a constant), and its canonical
    line around the parameters' text (``head`` + ``(a,b)`` + ``tail``)."""

    index: int
    op: Operation
    slots: tuple[int | None, ...]
    head: str
    tail: str
    #: the slot of an operation's one parameter (None: several, or a constant among them).
    single: int | None


def _split_line(writer: CanonicalWriter, op: Operation) -> tuple[str, str]:
    """The canonical line of ``op`` before and after its parameter list: the writer's own
    line with every parameter 0.0, cut around ``(0.0,…)`` (the qubit list after it holds
    no parenthesis)."""
    zeros = Operation(op.name, op.qubits, (0.0,) * len(op.params), op.clbits, op.condition)
    line = writer.line(zeros)
    placeholder = "(" + ",".join(["0.0"] * len(op.params)) + ")"
    cut = line.rindex(placeholder)
    return line[:cut], line[cut + len(placeholder) :]


class Shape:
    """One traced structure of a template (see the module docstring)."""

    def __init__(self, circuit: Circuit, tape: Tape, inputs: Sequence[str], number: int):
        #: this shape's number among its template's shapes.
        self.number = number
        self.circuit = circuit
        ops = list(circuit.operations)
        self.writer = CanonicalWriter(circuit)
        slot_of: dict[str, int] = {}
        opened: list[Open] = []
        for index, op in enumerate(ops):
            params: tuple[object, ...] = op.params
            if not any(isinstance(p, Sym) for p in params):
                continue
            slots = tuple(
                slot_of.setdefault(p.name, len(slot_of)) if isinstance(p, Sym) else None
                for p in params
            )
            single = slots[0] if len(slots) == 1 else None
            opened.append(Open(index, op, slots, *_split_line(self.writer, op), single))
        self.opened = tuple(opened)
        #: the open operations by index.
        self.open_at = {o.index: o for o in opened}
        self.function = _generate(tape, inputs, list(slot_of))
        open_indices = {o.index for o in opened}
        self.lines = [
            "" if index in open_indices else self.writer.line(op) for index, op in enumerate(ops)
        ]

    def rounded(self, numbers: Sequence[float]) -> list[float]:
        """The values of the parameter slots for ``numbers`` (the symbolic inputs'
        values, in order), each rounded as the canonical form rounds parameters."""
        try:
            values, check = self.function(*numbers)
        except (ArithmeticError, ValueError) as exc:
            raise Unbindable from exc
        if not -math.inf < check < math.inf:
            raise Unbindable
        return [round_param(v) for v in values]

    def params(self, o: Open, rounded: Sequence[float]) -> tuple[float, ...]:
        """The parameters of the open operation ``o`` given the slots' values."""
        if o.single is not None:
            return (rounded[o.single],)
        constant = o.op.params
        return tuple(
            [constant[k] if slot is None else rounded[slot] for k, slot in enumerate(o.slots)]
        )

    def bind(
        self,
        rounded: Sequence[float],
        source_hash: str | None = None,
        source_name: str | None = None,
    ) -> Circuit:
        """The circuit whose parameter slots hold ``rounded``."""
        ops = list(self.circuit.operations)
        for o in self.opened:
            op = o.op
            params = self.params(o, rounded)
            ops[o.index] = Operation(op.name, op.qubits, params, op.clbits, op.condition)
        return Circuit(
            num_qubits=self.circuit.num_qubits,
            num_clbits=self.circuit.num_clbits,
            qregs=self.circuit.qregs,
            cregs=self.circuit.cregs,
            operations=tuple(ops),
            source_hash=source_hash,
            source_name=source_name,
        )

    def text(self, rounded: Sequence[float]) -> str:
        """The canonical text of the circuit whose slots hold ``rounded`` (equal to
        :func:`~jobkeeper.circuit.canonical.canonical_text` of :meth:`bind`'s circuit):
        each slot written once, only the open operations' lines anew."""
        written = [format_rounded(v) for v in rounded]
        lines = list(self.lines)
        for o in self.opened:
            params = ",".join(
                [format_rounded(o.op.params[k]) if slot is None else written[slot]
                 for k, slot in enumerate(o.slots)]
            )  # fmt: skip
            lines[o.index] = f"{o.head}({params}){o.tail}"
        return "\n".join((*self.writer.header, *lines)) + "\n"


def _generate(
    tape: Tape, inputs: Sequence[str], results: Sequence[str]
) -> Callable[..., tuple[tuple[float, ...], float]]:
    """One function of the inputs ``v0, v1, …`` returning the values of ``results``
    (temporaries) and the sum of every temporary (not finite: some intermediate was
    not)."""
    args = ", ".join(f"v{i}" for i in range(len(inputs)))
    body = [f"    {line}" for line in tape.lines]
    names = [f"t{i}" for i in range(len(tape.lines))]
    body.append("    _c = 0.0")
    for start in range(0, len(names), _CHECK_CHUNK):
        body.append(f"    _c = _c + {' + '.join(names[start : start + _CHECK_CHUNK])}")
    packed = "".join(f"{name}, " for name in results)
    body.append(f"    return ({packed}), _c")
    source = f"def _bound({args}):\n" + "\n".join(body) + "\n"
    namespace: dict[str, Any] = dict(tape.functions)
    exec(compile(source, "<template trace>", "exec"), namespace)  # our own text, made above
    function: Callable[..., tuple[tuple[float, ...], float]] = namespace["_bound"]
    return function


class CompiledTemplate:
    """A template's traced shapes (see the module docstring). ``program`` and
    ``inputs`` are the template's."""

    def __init__(
        self, program: tuple[n.Statement, ...], inputs: Mapping[str, str], filename: str | None
    ):
        self.program = program
        self.inputs = dict(inputs)
        self.filename = filename
        self.symbolic = [name for name, kind in self.inputs.items() if kind in SYMBOLIC_TYPES]
        self.shapes: dict[tuple[tuple[str, object], ...], Shape | None] = {}

    def shape(self, values: Mapping[str, float]) -> Shape:
        """The shape for these values (traced when first needed); Unbindable when the
        template does not trace with them."""
        key = tuple(
            (type(values[name]).__name__, values[name])
            for name in self.inputs
            if name not in self.symbolic
        )
        if key not in self.shapes:
            if len(self.shapes) >= MAX_SHAPES:
                raise Unbindable
            self.shapes[key] = self._trace(values)
        found = self.shapes[key]
        if found is None:
            raise Unbindable
        return found

    def numbers(self, values: Mapping[str, float]) -> list[float]:
        """The symbolic inputs' values, in the order a shape's function takes them."""
        return [float(values[name]) for name in self.symbolic]

    def _trace(self, values: Mapping[str, float]) -> Shape | None:
        tape = Tape()
        bindings: dict[str, object] = dict(values)
        for i, name in enumerate(self.symbolic):
            bindings[name] = Sym(tape, f"v{i}")
        interpreter = TracingInterpreter(self.filename, bindings, tape)
        try:
            interpreter.run(self.program)
            circuit = interpreter.circuit()
            return Shape(circuit, tape, self.symbolic, len(self.shapes))
        except Exception:
            # Any failure of the trace (NeedsValue, or an error the interpreter will
            # report itself) means: bind this template the slow way.
            return None
