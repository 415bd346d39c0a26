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
from typing import NoReturn

from jobkeeper.circuit.lexer import EOF, ID, INT, MAX_LITERAL_LENGTH, REAL, STRING, SYMBOL, Token
from jobkeeper.exceptions import CircuitError

DURATION = "duration"
IMAG = "imag"
HWQ = "hwq"

_DIGITS = frozenset("0123456789")
_SPACE = frozenset(" \t\r\n\f\v")
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


def _shown(char: str) -> str:
    return repr(char) if char.isprintable() else f"U+{ord(char):04X}"


def tokenize3(text: str, file: str | None) -> list[Token]:
    """All tokens of ``text`` and one EOF token; CircuitError on text that is no token."""
    if "\r" in text:
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    tokens: list[Token] = []
    append = tokens.append
    new = tuple.__new__
    n = len(text)
    i = 0
    line = 1
    line_start = 0

    def fail(message: str, at: int) -> NoReturn:
        raise CircuitError(message, file=file, line=line, column=at - line_start + 1)

    while i < n:
        ch = text[i]
        if ch in _SPACE:
            if ch == "\n":
                line += 1
                line_start = i + 1
            i += 1
            continue
        col = i - line_start + 1
        if ch == "/" and i + 1 < n and text[i + 1] == "/":
            end = text.find("\n", i)
            i = n if end < 0 else end
            continue
        if ch == "/" and i + 1 < n and text[i + 1] == "*":
            end = text.find("*/", i + 2)
            if end < 0:
                fail("unterminated comment: '/*' without '*/'", i)
            # Lines inside the comment still count.
            k = text.find("\n", i, end)
            while k >= 0:
                line += 1
                line_start = k + 1
                k = text.find("\n", k + 1, end)
            i = end + 2
            continue
        if _id_start(ch):
            j = i + 1
            while j < n and _id_char(text[j]):
                j += 1
            append(new(Token, (ID, text[i:j], line, col)))
            i = j
            continue
        if ch in _DIGITS or (ch == "." and i + 1 < n and text[i + 1] in _DIGITS):
            kind, j, problem = _number(text, i, n)
            if problem:
                fail(problem, j)
            append(new(Token, (kind, text[i:j], line, col)))
            i = j
            continue
        if ch == '"' or ch == "'":
            j = i + 1
            while j < n and text[j] != ch and text[j] != "\n":
                j += 1
            if j >= n or text[j] != ch:
                fail(f"unterminated string: expected {ch!r} before the end of the line", i)
            append(new(Token, (STRING, text[i + 1 : j], line, col)))
            i = j + 1
            continue
        if ch == "$":
            j = i + 1
            while j < n and text[j] in _DIGITS:
                j += 1
            if j == i + 1:
                fail("expected digits after '$'", i)
            append(new(Token, (HWQ, text[i:j], line, col)))
            i = j
            continue
        if ch in _OP_START:
            for op in _OPERATORS:
                if text.startswith(op, i):
                    append(new(Token, (SYMBOL, op, line, col)))
                    i += len(op)
                    break
            continue
        fail(f"unexpected character {_shown(ch)}", i)
    append(Token(EOF, "", line, n - line_start + 1))
    return tokens


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
