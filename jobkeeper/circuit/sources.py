"""Reading program files: bytes to text, with failures as CircuitError naming the place."""

from __future__ import annotations

from pathlib import Path

from jobkeeper.circuit.lexer import Token
from jobkeeper.exceptions import CircuitError


def read_source(path: Path, what: str, *, file: str | None, at: Token | None = None) -> bytes:
    """The file's bytes. Errors name ``file`` and, for an include, the statement ``at``."""
    try:
        return path.read_bytes()
    except OSError as exc:
        raise CircuitError(
            f"cannot read {what}: {exc.strerror or exc}",
            file=file,
            line=at.line if at else None,
            column=at.column if at else None,
        ) from None


def decode_source(data: bytes, name: str) -> str:
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        column = exc.start - (data.rfind(b"\n", 0, exc.start) + 1) + 1
        raise CircuitError(
            f"not UTF-8 text (byte 0x{data[exc.start]:02x})", file=name, line=line, column=column
        ) from None
    return text
