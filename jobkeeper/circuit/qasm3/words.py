"""The words of OpenQASM 3 the subset reads, refuses or reserves."""

from __future__ import annotations

from typing import NoReturn

from jobkeeper.circuit.lexer import Token, TokenStream

MAX_NESTING = 48
SUPPORTED_VERSIONS = ("3", "3.0", "3.1")

#: Statement words outside the subset, with the feature named in the refusal.
UNSUPPORTED = {
    "delay": "delay",
    "box": "box",
    "stretch": "stretch",
    "duration": "duration",
    "durationof": "durationof",
    "cal": "cal",
    "defcal": "defcal",
    "defcalgrammar": "defcalgrammar",
    "extern": "extern",
    "def": "def (subroutines)",
    "return": "return (subroutines)",
    "while": "while",
    "switch": "switch",
    "break": "break",
    "continue": "continue",
    "end": "end",
    "array": "array",
    "complex": "complex",
    "let": "let (aliases)",
    "pragma": "pragma",
    "sizeof": "sizeof",
    "readonly": "readonly",
    "mutable": "mutable",
    "opaque": "opaque",
}
SCALAR_TYPES = frozenset({"int", "uint", "float", "bool", "bit", "angle"})
MODIFIERS = frozenset({"ctrl", "negctrl", "inv", "pow"})
#: Words that cannot name anything (the grammar's keywords and type names).
KEYWORDS = (
    frozenset(UNSUPPORTED)
    | SCALAR_TYPES
    | MODIFIERS
    | frozenset(
        {
            "OPENQASM", "include", "qubit", "qreg", "creg", "const", "input", "output", "gate",
            "measure", "reset", "barrier", "for", "in", "if", "else", "gphase", "true", "false",
            "case", "default",
        }
    )
)  # fmt: skip


def unsupported(stream: TokenStream, feature: str, tok: Token) -> NoReturn:
    stream.fail(f"{feature} is not supported", tok)
