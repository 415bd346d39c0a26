"""A circuit written as OpenQASM 3 text, for devices that read that language.

How an OpenQASM 2.0 circuit is written in OpenQASM 3 (the choice made here): from its
canonical form (``canonical.py``), so any program, 2.0 or 3, with user gates or not, is
written alike: ``OPENQASM 3.0;`` and ``include "stdgates.inc";``, one ``qubit[N] q;``, the
classical registers in declaration order as ``bit[n] c0; bit[m] c1; ...`` (their order
and sizes decide how count keys are written, so they are kept), then one statement per
operation on absolute indices: ``c0[1] = measure q[2];``, ``reset q[0];``,
``barrier q[0], q[1];`` and ``if (c0 == 3) x q[0];`` for a condition on a whole register.

Gates: OpenQASM 3's ``stdgates.inc`` holds most of the 2.0 standard header's gates under
the same names (the specification's standard_library.rst); this reader turns a call of
each into the same operation as its 2.0 twin, so the text reads back into a circuit with
the same canonical text and hash. The header's gates that ``stdgates.inc`` lacks (``u``,
``u0``, ``sxdg``, ``csx``, ``cu1``, ``cu3``, ``rxx``, ``rzz``, ``rccx``, ``rc3x``,
``c3x``, ``c3sqrtx``, ``c4x``) are declared at the top with the definitions jobkeeper's
own 2.0 header gives them (``stdgates.py``: arXiv:1707.03429 and the later headers): a
device runs the same operations, though they read back decomposed, under another hash.
OpenQASM 3 has no ``opaque`` gates: a circuit that declares one cannot be written.
"""

from __future__ import annotations

import re

from jobkeeper.circuit.canonical import Spelling, operation_line, register_names
from jobkeeper.circuit.ir import Circuit
from jobkeeper.circuit.stdgates import EXTENSIONS, QELIB1, STANDARD_GATES
from jobkeeper.exceptions import CircuitError

#: the gates of ``stdgates.inc`` (the specification's standard library) that the 2.0
#: header also has, under the same name and meaning.
SHARED_GATES = frozenset(
    {"p", "x", "y", "z", "h", "s", "sdg", "t", "tdg", "sx", "rx", "ry", "rz", "cx", "cy",
     "cz", "cp", "crx", "cry", "crz", "ch", "swap", "ccx", "cswap", "cu", "id", "u1", "u2",
     "u3"}
)  # fmt: skip

#: statements as OpenQASM 3 writes them (the specification's "Classical instructions":
#: ``c[0] = measure q[0];``, ``if (c == 3) ...``)
OPENQASM3 = Spelling(
    comma=", ", condition="if ({register} == {value}) ", measure="{bit} = measure {qubit};"
)

_DEFINITION = re.compile(r"gate\s+(\w+)[^{]*\{[^}]*\}")
_WORD = re.compile(r"[A-Za-z_]\w*")


def _header_definitions() -> dict[str, str]:
    """The 2.0 header's gate definitions by name, in the header's order (each uses only
    gates defined before it)."""
    found: dict[str, str] = {}
    for match in _DEFINITION.finditer(QELIB1 + EXTENSIONS):
        found[match[1]] = " ".join(match[0].split())
    return found


_HEADER = _header_definitions()


def _declarations(names: set[str]) -> list[str]:
    """The definitions of ``names`` and of every non-shared gate they use, in order."""
    needed = set(names)
    for name in reversed(list(_HEADER)):  # later definitions use earlier ones only
        if name in needed:
            body = _HEADER[name].split("{", 1)[1]
            needed |= {w for w in _WORD.findall(body) if w in _HEADER and w not in SHARED_GATES}
    return [text for name, text in _HEADER.items() if name in needed]


def openqasm3_text(circuit: Circuit) -> str:
    """``circuit`` as OpenQASM 3 text (see the module docstring); CircuitError for a
    circuit with opaque gates or an operation it cannot write."""
    if circuit.opaque or circuit.opaque_signatures:
        opaque = sorted(circuit.opaque | {name for name, _, _ in circuit.opaque_signatures})
        raise CircuitError(
            f"OpenQASM 3 has no opaque gates; the circuit declares {', '.join(opaque)}"
        )
    unshared = {op.name for op in circuit.operations if op.name in STANDARD_GATES}
    unshared -= SHARED_GATES
    lines = ["OPENQASM 3.0;", 'include "stdgates.inc";', *_declarations(unshared)]
    if circuit.num_qubits:
        lines.append(f"qubit[{circuit.num_qubits}] q;")
    lines += [f"bit[{reg.size}] c{k};" for k, reg in enumerate(circuit.cregs)]
    names = register_names(circuit)
    lines += [operation_line(circuit, op, names, {}, OPENQASM3) for op in circuit.operations]
    return "\n".join(lines) + "\n"
