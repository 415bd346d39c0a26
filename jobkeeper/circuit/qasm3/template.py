"""A program with ``input`` parameters, parsed once and bound many times.

``Template.bind(values)`` runs the parsed tree with the inputs set and returns an
ordinary :class:`~jobkeeper.circuit.ir.Circuit`, the same circuit (same canonical text
and hash) as the program with the values written in as literals.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from numbers import Real

from jobkeeper.circuit.canonical import canonical_text
from jobkeeper.circuit.ir import Circuit
from jobkeeper.circuit.qasm3 import nodes as n
from jobkeeper.circuit.qasm3.compiled import CompiledTemplate, Shape, Unbindable
from jobkeeper.circuit.qasm3.interpret import Interpreter
from jobkeeper.circuit.qasm3.syntax import parse_program
from jobkeeper.exceptions import CircuitError
from jobkeeper.hashing import sha256_tag

_VERSION = re.compile(r"OPENQASM\s+([^\s;]*)")
_SKIP = re.compile(r"(?:\s+|//[^\n]*|/\*.*?\*/)*", re.DOTALL)


def language_version(text: str) -> int:
    """2 when the program starts with ``OPENQASM 2...``, else 3: the version line decides
    the language, and a program without one is OpenQASM 3 (the specification's version
    statement is optional, ../shared/corpus/qasm3/spec/directives.rst)."""
    start = 1 if text.startswith("\ufeff") else 0
    skipped = _SKIP.match(text, start)
    at = skipped.end() if skipped else start
    match = _VERSION.match(text, at)
    return 2 if match and match.group(1).startswith("2") else 3


@dataclass(frozen=True, slots=True)
class BoundPoint:
    """A bound point: the circuit, its canonical text (empty when not asked for), and
    ``shape``: points of one template with the same shape number have the same
    operations but for their parameters (None: bound by the interpreter, shape
    unknown)."""

    circuit: Circuit
    text: str
    shape: int | None


class Template:
    """A parsed OpenQASM 3 program and its inputs (name → declared type). A program
    without inputs read elsewhere (OpenQASM 2.0) is a template too: pass its circuit as
    ``fixed`` (:func:`jobkeeper.circuit.parser.parse_template` does)."""

    def __init__(
        self,
        text: str,
        *,
        filename: str | None = None,
        source_hash: str | None = None,
        fixed: Circuit | None = None,
    ):
        self.text = text
        self.filename = filename
        self.source_hash = source_hash or sha256_tag(text.encode("utf-8", "surrogatepass"))
        self.fixed: Circuit | None = None
        self.inputs: dict[str, str] = {}
        self.program: tuple[n.Statement, ...] = ()
        if fixed is not None:
            self.fixed = replace(fixed, source_hash=self.source_hash)
            return
        try:
            self.program = parse_program(text, filename)
        except RecursionError:
            raise CircuitError("program nested too deeply to parse here", file=filename) from None
        self.inputs = {
            stmt.name.text: stmt.type.name for stmt in self.program if isinstance(stmt, n.InputDecl)
        }
        self._compiled = CompiledTemplate(self.program, self.inputs, filename)

    def __getstate__(self) -> dict[str, object]:
        # The traces hold generated functions, which do not pickle: a copy (a worker
        # process's) traces again when it first binds.
        state = dict(self.__dict__)
        state["_compiled"] = None
        return state

    def __setstate__(self, state: dict[str, object]) -> None:
        self.__dict__.update(state)
        self._compiled = CompiledTemplate(self.program, self.inputs, self.filename)

    def bind(self, values: Mapping[str, float] | None = None) -> Circuit:
        """The circuit with each input set to ``values[name]``. CircuitError (exit 2)
        naming them for inputs without a value, values for names that are no input, and
        values that are not finite numbers.

        Fast after the first point: the program is traced once (its float inputs kept
        symbolic, :mod:`.compiled`) and each point only evaluates the traced parameters;
        a program that does not trace, or a point the trace cannot decide, is run by the
        interpreter. Either way the circuit is the same."""
        return self.bind_canonical(values, text=False)[0]

    def bind_canonical(
        self, values: Mapping[str, float] | None = None, *, text: bool = True
    ) -> tuple[Circuit, str]:
        """The bound circuit and its canonical text (what :func:`canonical_text` gives;
        written fast for a traced template: only the lines of operations whose
        parameters depend on the inputs are formatted per point). With ``text=False``
        the text is left empty."""
        point = self._bind(dict(values or {}), text)
        return point.circuit, point.text

    def bind_many(
        self, points: Sequence[Mapping[str, float]], *, text: bool = True
    ) -> list[BoundPoint]:
        """Each point bound (as :meth:`bind_canonical`), with the structure it took."""
        return [self._bind(dict(values), text) for values in points]

    def _bind(self, values: dict[str, float], text: bool) -> BoundPoint:
        self._check(values)
        if self.fixed is not None:
            return BoundPoint(self.fixed, canonical_text(self.fixed) if text else "", 0)
        traced = self._traced(values)
        if traced is None:
            circuit = self._interpret(values)
            return BoundPoint(circuit, canonical_text(circuit) if text else "", None)
        shape, rounded = traced
        circuit = shape.bind(rounded, self.source_hash, self.filename)
        return BoundPoint(circuit, shape.text(rounded) if text else "", shape.number)

    def traced(self, values: Mapping[str, float]) -> tuple[Shape, list[float]] | None:
        """The traced shape of this point and the values of its parameter slots (the
        parameters as the canonical form rounds them), for who needs no Circuit (a
        batch simulates from the slots); None when the interpreter must bind it
        (:meth:`bind` then does). CircuitError as :meth:`bind` for bad values."""
        values = dict(values)
        self._check(values)
        return None if self.fixed is not None else self._traced(values)

    def _traced(self, values: dict[str, float]) -> tuple[Shape, list[float]] | None:
        try:
            shape = self._compiled.shape(values)
            return shape, shape.rounded(self._compiled.numbers(values))
        except Unbindable:
            return None

    def _check(self, values: Mapping[str, float]) -> None:
        unknown = sorted(set(values) - set(self.inputs))
        if unknown:
            known = ", ".join(sorted(self.inputs)) or "none"
            raise CircuitError(
                f"no input named {', '.join(unknown)} (the program's inputs: {known})",
                file=self.filename,
            )
        missing = sorted(set(self.inputs) - set(values))
        if missing:
            raise CircuitError(
                f"input(s) without a value: {', '.join(missing)}", file=self.filename
            )
        if self.fixed is not None:
            return
        for name, value in values.items():
            if isinstance(value, bool) or not isinstance(value, Real) or not math.isfinite(value):
                raise CircuitError(
                    f"input {name} = {value!r} is not a finite number", file=self.filename
                )

    def _interpret(self, values: Mapping[str, float]) -> Circuit:
        interpreter = Interpreter(self.filename, values)
        try:
            interpreter.run(self.program)
        except RecursionError:
            raise CircuitError(
                "program nested too deeply to run here", file=self.filename
            ) from None
        circuit = interpreter.circuit()
        return Circuit(
            num_qubits=circuit.num_qubits,
            num_clbits=circuit.num_clbits,
            qregs=circuit.qregs,
            cregs=circuit.cregs,
            operations=circuit.operations,
            source_hash=self.source_hash,
            source_name=self.filename,
        )
