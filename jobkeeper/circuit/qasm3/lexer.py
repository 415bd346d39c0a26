"""Tokenizer for OpenQASM 3 (the specification's lexical grammar, qasm3Lexer.g4, and
the chapter "Comments and whitespace" in ../shared/corpus/qasm3/spec/comments.rst).

One left-to-right pass, each character looked at a bounded number of times: linear in
the input whatever it is. Tokens are the :class:`~jobkeeper.circuit.lexer.Token` tuples
of the OpenQASM 2.0 reader, so :class:`~jobkeeper.circuit.lexer.TokenStream` (with its
error placement) serves both. Extra kinds: ``duration`` (``100ns``; refused by the
parser as a timing feature), ``imag`` (``1.5im``), ``hwq`` (``$0``).
"""

from __future__ import annotations

import unicodedata
from collections.abc import Iterator

from jobkeeper.circuit.lexer import (
    EOF,
    ID,
    INT,
    MAX_LITERAL_LENGTH,
    REAL,
    STRING,
    SYMBOL,
    Fail,
    Token,
    scan,
    shown,
    string_token,
)

DURATION = "duration"
IMAG = "imag"
HWQ = "hwq"

_DIGITS = frozenset("0123456789")
_ASCII_ID = frozenset("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ_")
#: Unicode letter categories the grammar's ``FirstIdCharacter`` admits.
_LETTER_CATEGORIES = frozenset({"Lu", "Ll", "Lt", "Lm", "Lo", "Nl"})
_TIME_UNITS = ("dt", "ns", "us", "µs", "ms", "s")
#: Longest operators first: the lexer takes the longest match (maximal munch).
_OPERATORS = (
    "<<=", ">>=", "**=",
    "**", "&&", "||", "<<", ">>", "==", "!=", "<=", ">=", "->", "++",
    "+=", "-=", "*=", "/=", "&=", "|=", "^=", "%=", "~=",
    ";", ",", "(", ")", "[", "]", "{", "}", "+", "-", "*", "/", "%", "^", "&", "|",
    "~", "!", "<", ">", "=", "@", ":", "#", ".",
)  # fmt: skip
_OP_START = frozenset(op[0] for op in _OPERATORS)


def _id_start(ch: str) -> bool:
    return ch in _ASCII_ID or (ord(ch) > 127 and unicodedata.category(ch) in _LETTER_CATEGORIES)


def _id_char(ch: str) -> bool:
    return ch in _ASCII_ID or ch in _DIGITS or _id_start(ch)


def tokenize3(text: str, file: str | None) -> Iterator[Token]:
    """The tokens of ``text`` and one EOF token, as they are read; CircuitError on text
    that is no token, when it is reached."""
    return scan(text, file, _read)


_new = tuple.__new__  # see circuit/lexer.py: the named tuple's constructor is slow


def _read(text: str, i: int, line: int, col: int, fail: Fail) -> tuple[Token | None, int]:
    n = len(text)
    ch = text[i]
    if ch == "/" and i + 1 < n and text[i + 1] == "*":
        end = text.find("*/", i + 2)
        if end < 0:
            fail("unterminated comment: '/*' without '*/'", i)
        return None, end + 2
    if _id_start(ch):
        j = i + 1
        while j < n and _id_char(text[j]):
            j += 1
        return _new(Token, (ID, text[i:j], line, col)), j
    if ch in _DIGITS or (ch == "." and i + 1 < n and text[i + 1] in _DIGITS):
        kind, j, problem = _number(text, i, n)
        if problem:
            fail(problem, j)
        return _new(Token, (kind, text[i:j], line, col)), j
    if ch == '"' or ch == "'":
        return string_token(text, i, line, col, fail)
    if ch == "$":
        j = i + 1
        while j < n and text[j] in _DIGITS:
            j += 1
        if j == i + 1:
            fail("expected digits after '$'", i)
        return _new(Token, (HWQ, text[i:j], line, col)), j
    if ch in _OP_START:
        for op in _OPERATORS:
            if text.startswith(op, i):
                return _new(Token, (SYMBOL, op, line, col)), i + len(op)
    fail(f"unexpected character {shown(ch)}", i)


def _digits(text: str, i: int, n: int, allowed: frozenset[str]) -> int:
    """End of a run of ``allowed`` digits in which single underscores may separate digits."""
    j = i
    while j < n:
        if text[j] in allowed or (
            text[j] == "_" and j > i and j + 1 < n and text[j + 1] in allowed
        ):
            j += 1
        else:
            break
    return j


_BASES = {
    "b": frozenset("01"),
    "o": frozenset("01234567"),
    "x": frozenset("0123456789abcdefABCDEF"),
}


def _number(text: str, i: int, n: int) -> tuple[str, int, str]:
    """The kind and end of the number literal at ``i``, or a problem and where it is."""
    kind = INT
    if text[i] == "0" and i + 2 < n and text[i + 1].lower() in _BASES:
        j = _digits(text, i + 2, n, _BASES[text[i + 1].lower()])
        if j == i + 2:
            return kind, i, "malformed number: expected digits after the base prefix"
    else:
        j = _digits(text, i, n, _DIGITS)
        if j < n and text[j] == ".":
            kind = REAL
            j = _digits(text, j + 1, n, _DIGITS)
        if j < n and text[j] in "eE":
            k = j + 1
            if k < n and text[k] in "+-":
                k += 1
            if k >= n or text[k] not in _DIGITS:
                return kind, k, "malformed number: expected digits after the exponent"
            j = _digits(text, k, n, _DIGITS)
            kind = REAL
    if j - i > MAX_LITERAL_LENGTH:
        return kind, i, f"number literal longer than {MAX_LITERAL_LENGTH} characters"
    # A unit directly after the number makes a duration; "im" an imaginary literal.
    for unit in _TIME_UNITS:
        if text.startswith(unit, j) and not (j + len(unit) < n and _id_char(text[j + len(unit)])):
            return DURATION, j + len(unit), ""
    if text.startswith("im", j) and not (j + 2 < n and _id_char(text[j + 2])):
        return IMAG, j + 2, ""
    return kind, j, ""


__all__ = ["DURATION", "EOF", "HWQ", "ID", "IMAG", "INT", "REAL", "STRING", "SYMBOL", "tokenize3"]
