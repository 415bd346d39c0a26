"""OpenQASM 3 (a subset) read into the same circuit IR as OpenQASM 2.0.

See :mod:`.syntax` for what is read and what is refused, :mod:`.interpret` for how
classical control becomes the IR, :mod:`.modifiers` for gate modifiers, and
:mod:`.template` for programs with ``input`` parameters.
"""

from __future__ import annotations

from jobkeeper.circuit.ir import Circuit
from jobkeeper.circuit.qasm3.template import Template, language_version


def parse_qasm3(
    text: str, *, filename: str | None = None, source_hash: str | None = None
) -> Circuit:
    """Parse an OpenQASM 3 program without inputs (a program with inputs: see Template)."""
    return Template(text, filename=filename, source_hash=source_hash).bind({})


__all__ = ["Template", "language_version", "parse_qasm3"]
