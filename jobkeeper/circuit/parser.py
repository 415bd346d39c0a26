"""OpenQASM 2.0 → :class:`~jobkeeper.circuit.ir.Circuit` (arXiv:1707.03429), and the
entry point for both languages: the version line decides (``OPENQASM 2.x;`` is read here;
``OPENQASM 3``/``3.x`` or no version line goes to :mod:`jobkeeper.circuit.qasm3`),
whatever the file is called.

Recursive descent over the tokens of :mod:`jobkeeper.circuit.lexer`. User gates are
inlined here, iteratively (an explicit stack, not recursion), down to standard gates,
opaque gates and the non-gate operations; the builtins ``U`` and ``CX`` become ``u3`` and
``cx``, which the standard header defines as exactly those.

Work is bounded: the text is read once, expressions nest at most
:data:`~jobkeeper.circuit.expressions.MAX_NESTING` deep, and a program may expand (by
broadcasting and gate inlining) to at most :data:`MAX_WORK` units of operations, operands
and expression nodes. A ten-line program cannot make the parser run for hours.
"""

from __future__ import annotations

import os
from pathlib import Path

from jobkeeper.circuit.canonical import round_param
from jobkeeper.circuit.expressions import ExpressionError, parse_expression
from jobkeeper.circuit.gates import RESERVED, GateSpec, check_arity, parse_gate_definition
from jobkeeper.circuit.ir import BARRIER, MEASURE, RESET, Circuit, Condition, Operation, Register
from jobkeeper.circuit.lexer import EOF, ID, INT, REAL, STRING, Token, TokenStream, tokenize
from jobkeeper.circuit.qasm3 import Template, language_version, parse_qasm3
from jobkeeper.circuit.sources import decode_source, read_source
from jobkeeper.circuit.stdgates import ORIGINAL_GATES, STANDARD_GATES
from jobkeeper.exceptions import CircuitError
from jobkeeper.hashing import sha256_tag

#: Units (operations + operands + expression nodes) a program may expand to.
MAX_WORK = 8_000_000
MAX_REGISTER_SIZE = 1 << 24
MAX_INCLUDE_DEPTH = 16
STANDARD_HEADER = "qelib1.inc"

_BUILTIN_NAMES = {"U": "u3", "CX": "cx"}
_U_SPEC = GateSpec("U", ("theta", "phi", "lambda"), ("q",), None, standard=True)
_CX_SPEC = GateSpec("CX", (), ("c", "t"), None, standard=True)


def parse_qasm(text: str, *, filename: str | None = None, base_dir: Path | None = None) -> Circuit:
    """Parse an OpenQASM program (2.0, or 3 by its version line). ``filename`` names it in
    error messages; ``base_dir`` is the folder other OpenQASM 2.0 includes are resolved in
    (without it, only the standard header may be included)."""
    if language_version(text) == 3:
        return parse_qasm3(text, filename=filename)
    program = _Program()
    _guarded(program, text, filename, base_dir)
    return program.circuit(
        source_hash=sha256_tag(text.encode("utf-8", "surrogatepass")), source_name=filename
    )


def load_qasm(path: str | os.PathLike[str]) -> Circuit:
    """Read and parse a file; ``source_hash`` is the hash of its bytes."""
    path = Path(path)
    data = read_source(path, str(path), file=str(path))
    text = decode_source(data, str(path))
    if language_version(text) == 3:
        return parse_qasm3(text, filename=str(path), source_hash=sha256_tag(data))
    program = _Program()
    _guarded(program, text, str(path), path.parent)
    return program.circuit(source_hash=sha256_tag(data), source_name=str(path))


def parse_template(
    text: str, *, filename: str | None = None, base_dir: Path | None = None
) -> Template:
    """A program as a template: OpenQASM 3 with its ``input`` parameters, or an OpenQASM
    2.0 program (no inputs) read now."""
    if language_version(text) == 3:
        return Template(text, filename=filename)
    return Template(
        text, filename=filename, fixed=parse_qasm(text, filename=filename, base_dir=base_dir)
    )


def load_template(path: str | os.PathLike[str]) -> Template:
    """Read a program file as a template; its ``source_hash`` is the hash of the bytes."""
    path = Path(path)
    data = read_source(path, str(path), file=str(path))
    text = decode_source(data, str(path))
    digest = sha256_tag(data)
    if language_version(text) == 3:
        return Template(text, filename=str(path), source_hash=digest)
    fixed = parse_qasm(text, filename=str(path), base_dir=path.parent)
    return Template(text, filename=str(path), source_hash=digest, fixed=fixed)


def _guarded(program: _Program, text: str, file: str | None, base_dir: Path | None) -> None:
    try:
        program.parse_source(text, file, base_dir, top=True)
    except RecursionError:
        # Nesting is bounded well below the interpreter's limit; this only happens when the
        # caller itself runs near that limit. Still a refusal, never a crash.
        raise CircuitError("program nested too deeply to parse here", file=file) from None


class _Program:
    """The state of one program as its statements are read, includes included."""

    def __init__(self) -> None:
        self.qregs: dict[str, Register] = {}
        self.cregs: dict[str, Register] = {}
        self.creg_bits: dict[str, tuple[int, ...]] = {}
        self.gates: dict[str, GateSpec] = {}
        self.standard_included = False
        self.extension_used: dict[str, int] = {}
        self.ops: list[Operation] = []
        self.work = 0
        self.num_qubits = 0
        self.num_clbits = 0
        self.include_stack: list[Path] = []
        self.stream = TokenStream([], None)

    def circuit(self, *, source_hash: str, source_name: str | None) -> Circuit:
        opaque = sorted((g for g in self.gates.values() if g.opaque), key=lambda g: g.name)
        return Circuit(
            num_qubits=self.num_qubits,
            num_clbits=self.num_clbits,
            qregs=tuple(self.qregs.values()),
            cregs=tuple(self.cregs.values()),
            operations=tuple(self.ops),
            opaque=frozenset(g.name for g in opaque),
            source_hash=source_hash,
            source_name=source_name,
            opaque_signatures=tuple((g.name, g.num_params, g.num_qubits) for g in opaque),
        )

    # ---- statements -------------------------------------------------------------------

    def parse_source(
        self, text: str, file: str | None, base_dir: Path | None, *, top: bool
    ) -> None:
        if text.startswith("\ufeff"):
            text = text[1:]  # a byte-order mark is not part of the program (common practice)
        outer = self.stream
        self.stream = stream = TokenStream(tokenize(text, file), file)
        first = stream.peek()
        if first.text == "OPENQASM" and first.kind == ID:
            stream.advance()
            version = stream.peek()
            if version.kind not in (INT, REAL) or version.text not in ("2.0", "2"):
                stream.fail_expected("version '2.0' (only OpenQASM 2.0 is supported)")
            stream.advance()
            stream.expect(";")
        elif top:
            stream.fail_expected("'OPENQASM 2.0;' as the first statement")
        while stream.peek().kind != EOF:
            self.statement(base_dir)
        self.stream = outer

    def statement(self, base_dir: Path | None) -> None:
        stream = self.stream
        tok = stream.peek()
        if tok.kind != ID:
            stream.fail_expected("a statement")
        word = tok.text
        if word in ("qreg", "creg"):
            self.declare_register(stream.advance())
        elif word in ("gate", "opaque"):
            self.define_gate(stream.advance())
        elif word == "include":
            stream.advance()
            name = stream.expect_kind(STRING, "a file name in double quotes")
            stream.expect(";")
            self.include(name, base_dir)
        elif word == "barrier":
            stream.advance()
            qubits: set[int] = set()
            while True:
                indices = self.argument(quantum=True)[0]
                self.charge(len(indices), tok)
                qubits.update(indices)
                if not stream.accept(","):
                    break
            stream.expect(";")
            self.charge(1, tok)
            self.ops.append(Operation(BARRIER, tuple(sorted(qubits))))
        elif word == "if":
            stream.advance()
            stream.expect("(")
            reg = stream.expect_kind(ID, "a classical register name")
            if reg.text not in self.cregs:
                what = "a quantum register" if reg.text in self.qregs else "not declared"
                stream.fail(f"'{reg.text}' in if(...) is {what}; expected a creg", reg)
            stream.expect("==")
            # A value too large for the register is valid OpenQASM 2.0 (never true).
            value = int(stream.expect_kind(INT, "a non-negative integer").text)
            stream.expect(")")
            condition = Condition(self.creg_bits[reg.text], value)
            nxt = stream.peek()
            if nxt.kind == ID and nxt.text in ("barrier", "if", "gate", "opaque", "qreg", "creg"):
                stream.fail(
                    f"'{nxt.text}' cannot follow if(...); expected a gate call, measure or reset",
                    nxt,
                )
            self.quantum_operation(condition)
        elif word == "OPENQASM":
            stream.fail("'OPENQASM' may only be the first statement", tok)
        else:
            self.quantum_operation(None)

    def quantum_operation(self, condition: Condition | None) -> None:
        stream = self.stream
        tok = stream.advance()
        if tok.kind != ID:
            stream.fail(f"expected a gate call, measure or reset, found {tok.describe()}", tok)
        if tok.text == "measure":
            qubits, q_reg = self.argument(quantum=True)
            stream.expect("->")
            arrow_target = stream.peek()
            bits, c_reg = self.argument(quantum=False)
            stream.expect(";")
            if q_reg != c_reg:
                stream.fail("measure takes a qubit and a bit, or two registers", arrow_target)
            if len(qubits) != len(bits):
                stream.fail(
                    f"register sizes differ in broadcast: {len(qubits)} qubits, {len(bits)} bits",
                    arrow_target,
                )
            self.charge(3 * len(qubits), tok)
            for q, c in zip(qubits, bits, strict=True):
                self.ops.append(Operation(MEASURE, (q,), (), (c,), condition))
        elif tok.text == "reset":
            qubits, _ = self.argument(quantum=True)
            stream.expect(";")
            self.charge(2 * len(qubits), tok)
            self.ops.extend(Operation(RESET, (q,), (), (), condition) for q in qubits)
        else:
            self.gate_call(tok, condition)

    def declare_register(self, keyword: Token) -> None:
        stream = self.stream
        name = stream.expect_kind(ID, "a register name")
        if name.text in RESERVED:
            stream.fail(f"'{name.text}' is a reserved word and cannot name a register", name)
        if name.text in self.qregs or name.text in self.cregs:
            stream.fail(f"register '{name.text}' is already declared", name)
        stream.expect("[")
        size_tok = stream.expect_kind(INT, "the register size (a positive integer)")
        size = int(size_tok.text)
        if not 0 < size <= MAX_REGISTER_SIZE:
            stream.fail(f"register size must be between 1 and {MAX_REGISTER_SIZE}", size_tok)
        total = self.num_qubits if keyword.text == "qreg" else self.num_clbits
        if total + size > MAX_REGISTER_SIZE:
            kind = "qubits" if keyword.text == "qreg" else "bits"
            stream.fail(f"more than {MAX_REGISTER_SIZE} {kind} in total", size_tok)
        stream.expect("]")
        stream.expect(";")
        if keyword.text == "qreg":
            self.qregs[name.text] = Register(name.text, size, self.num_qubits)
            self.num_qubits += size
        else:
            offset = self.num_clbits
            self.cregs[name.text] = Register(name.text, size, offset)
            self.creg_bits[name.text] = tuple(range(offset, offset + size))
            self.num_clbits += size

    def argument(self, *, quantum: bool) -> tuple[range, bool]:
        """Absolute indices of ``name`` or ``name[i]``, and whether it was a register."""
        stream = self.stream
        kind = "qubit" if quantum else "bit"
        tok = stream.expect_kind(ID, f"a {kind} argument")
        own, other = (self.qregs, self.cregs) if quantum else (self.cregs, self.qregs)
        reg = own.get(tok.text)
        if reg is None:
            if tok.text in other:
                which = "classical" if quantum else "quantum"
                stream.fail(f"'{tok.text}' is a {which} register; expected a {kind} argument", tok)
            stream.fail(f"undeclared register '{tok.text}'", tok)
        if not stream.accept("["):
            # A range, not a tuple: `cx q, q, q, ...` must not cost the size per argument.
            return range(reg.offset, reg.offset + reg.size), True
        index_tok = stream.expect_kind(INT, "an index (a non-negative integer)")
        index = int(index_tok.text)
        if index >= reg.size:
            stream.fail(
                f"{kind} index {index} out of range for register {reg.name}[{reg.size}]",
                index_tok,
            )
        stream.expect("]")
        return range(reg.offset + index, reg.offset + index + 1), False

    # ---- gates ------------------------------------------------------------------------

    def lookup(self, tok: Token) -> GateSpec:
        name = tok.text
        if name in self.gates:
            return self.gates[name]
        if self.standard_included and name in STANDARD_GATES:
            self.extension_used.setdefault(name, tok.line)
            return STANDARD_GATES[name]
        hint = f' (include "{STANDARD_HEADER}" defines it)' if name in STANDARD_GATES else ""
        self.stream.fail(f"undefined gate '{name}'{hint}", tok)

    def define_gate(self, keyword: Token) -> None:
        stream = self.stream
        name_tok = stream.peek()
        spec = parse_gate_definition(stream, keyword, self.lookup)
        name = spec.name
        if name in self.gates:
            stream.fail(
                f"gate '{name}' is already defined on line {self.gates[name].line}", name_tok
            )
        if self.standard_included and name in ORIGINAL_GATES:
            stream.fail(f"gate '{name}' is already defined by {STANDARD_HEADER}", name_tok)
        if name in self.extension_used:
            stream.fail(
                f"gate '{name}' is defined after the standard '{name}' was used on "
                f"line {self.extension_used[name]}",
                name_tok,
            )
        if spec.opaque and name in ORIGINAL_GATES:
            # Even without the header: U and CX become u3 and cx in the IR, and canonical
            # text always includes the header. (An opaque gate may take an extension's
            # name; Circuit.opaque then says which meaning an operation has.)
            stream.fail(f"opaque gate '{name}' would shadow the standard gate '{name}'", name_tok)
        self.gates[name] = spec

    def include(self, name: Token, base_dir: Path | None) -> None:
        stream = self.stream
        if name.text == STANDARD_HEADER:
            clash = sorted(gate for gate in ORIGINAL_GATES if gate in self.gates)
            if clash:
                stream.fail(
                    f"{STANDARD_HEADER} defines '{clash[0]}', which this program "
                    f"already defined on line {self.gates[clash[0]].line}",
                    name,
                )
            self.standard_included = True
            return
        if base_dir is None:
            stream.fail(f'cannot include "{name.text}": the program was not read from a file', name)
        try:
            folder = base_dir.resolve()
            path = (folder / name.text).resolve()
        except (OSError, ValueError, RuntimeError) as exc:  # NUL bytes, symlink loops, ...
            stream.fail(f'cannot include "{name.text}": {exc}', name)
        if not path.is_relative_to(folder):
            stream.fail(f'include "{name.text}" is outside the folder {folder}', name)
        if path in self.include_stack:
            stream.fail(f'include "{name.text}" includes itself', name)
        if len(self.include_stack) >= MAX_INCLUDE_DEPTH:
            stream.fail(f"includes nested more than {MAX_INCLUDE_DEPTH} deep", name)
        data = read_source(path, f'include "{name.text}"', file=stream.file, at=name)
        # Including one big file many times must not make a short program expensive.
        self.charge(1 + len(data) // 4, name)
        data_name = str(path)
        self.include_stack.append(path)
        self.parse_source(decode_source(data, data_name), data_name, path.parent, top=False)
        self.include_stack.pop()

    def gate_call(self, tok: Token, condition: Condition | None) -> None:
        stream = self.stream
        if tok.text in _BUILTIN_NAMES:
            spec = _U_SPEC if tok.text == "U" else _CX_SPEC
        elif tok.text in RESERVED:
            stream.fail(f"expected a statement, found '{tok.text}'", tok)
        else:
            spec = self.lookup(tok)
        values: list[float] = []
        if stream.accept("("):
            if not stream.peek_is(")"):
                values.append(parse_expression(stream, {}).evaluate(()))
                while stream.accept(","):
                    values.append(parse_expression(stream, {}).evaluate(()))
            stream.expect(")")
        args: list[tuple[range, bool]] = []
        while True:
            args.append(self.argument(quantum=True))
            if not stream.accept(","):
                break
        stream.expect(";")
        check_arity(stream, tok, len(values), spec.num_params, len(args), spec.num_qubits)
        sizes = {len(indices) for indices, is_reg in args if is_reg}
        if len(sizes) > 1:
            stream.fail(f"register sizes differ in broadcast of '{tok.text}'", tok)
        count = sizes.pop() if sizes else 1
        leaf = spec.standard or spec.body is None
        self.charge(count * (1 + len(args) + len(values) if leaf else spec.cost), tok)
        params = tuple(values)
        for i in range(count):
            qubits = tuple(indices[i] if is_reg else indices[0] for indices, is_reg in args)
            if len(set(qubits)) != len(qubits):
                stream.fail(f"the same qubit appears twice in a call of '{tok.text}'", tok)
            self.emit(spec, params, qubits, condition, tok)

    def emit(
        self,
        spec: GateSpec,
        params: tuple[float, ...],
        qubits: tuple[int, ...],
        condition: Condition | None,
        tok: Token,
    ) -> None:
        ops = self.ops
        if spec.body is None or spec.standard:
            name = _BUILTIN_NAMES.get(spec.name, spec.name)
            ops.append(
                Operation(name, qubits, tuple(round_param(p) for p in params), (), condition)
            )
            return
        stack = [(spec.body, params, qubits, 0)]
        try:
            while stack:
                body, env, mapping, i = stack.pop()
                if i >= len(body):
                    continue
                stack.append((body, env, mapping, i + 1))
                op = body[i]
                mapped = tuple(mapping[k] for k in op.qubits)
                target = op.target
                if op.name == BARRIER:
                    ops.append(Operation(BARRIER, tuple(sorted(mapped))))
                    continue
                values = tuple(p.evaluate(env) for p in op.params)
                if target is None or target.standard or target.body is None:
                    name = _BUILTIN_NAMES.get(op.name, op.name)
                    ops.append(
                        Operation(
                            name, mapped, tuple(round_param(v) for v in values), (), condition
                        )
                    )
                else:
                    stack.append((target.body, values, mapped, 0))
        except ExpressionError as exc:
            stream = self.stream
            stream.fail(f"in the expansion of gate '{spec.name}': {exc}", tok)

    def charge(self, units: int, tok: Token) -> None:
        self.work += units
        if self.work > MAX_WORK:
            self.stream.fail(
                f"program too large: it expands to more than {MAX_WORK} units of work "
                "(operations, operands and expression nodes)",
                tok,
            )
