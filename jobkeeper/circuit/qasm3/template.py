"""A program with ``input`` parameters, parsed once and bound many times.

``Template.bind(values)`` runs the parsed tree with the inputs set and returns an
ordinary :class:`~jobkeeper.circuit.ir.Circuit`, the same circuit (same canonical text
and hash) as the program with the values written in as literals.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import replace
from numbers import Real

from jobkeeper.circuit.ir import Circuit
from jobkeeper.circuit.qasm3 import nodes as n
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

    def bind(self, values: Mapping[str, float] | None = None) -> Circuit:
        """The circuit with each input set to ``values[name]``. CircuitError (exit 2)
        naming them for inputs without a value, values for names that are no input, and
        values that are not finite numbers."""
        values = dict(values or {})
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
            return self.fixed
        for name, value in values.items():
            if isinstance(value, bool) or not isinstance(value, Real) or not math.isfinite(value):
                raise CircuitError(
                    f"input {name} = {value!r} is not a finite number", file=self.filename
                )
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
