"""Tokenizer for OpenQASM 2.0 (arXiv:1707.03429, appendix "OpenQASM grammar").

Hand-written on purpose: one left-to-right pass over the text, each character looked at a
bounded number of times, so tokenizing is linear in the input whatever the input is.
Columns count characters (code points), starting at 1, as editors show them.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Iterable, Iterator
from typing import NamedTuple, NoReturn

from jobkeeper.exceptions import CircuitError

ID = "id"
INT = "int"
REAL = "real"
STRING = "string"
SYMBOL = "symbol"
EOF = "eof"

#: Longer than any number a real program writes; bounds the cost of converting literals
#: (``int()`` of a long digit string is superlinear, and refused past 4300 digits).
MAX_LITERAL_LENGTH = 400

_ID_START = frozenset("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ_")
_ID_CHARS = _ID_START | frozenset("0123456789")
_DIGITS = frozenset("0123456789")
_SINGLE = frozenset(";,()[]{}+*/^")
_SPACE = frozenset(" \t\r\n\f\v")
#: Identifiers that do not start with a lowercase letter (the grammar's ``id`` does).
_UPPER_KEYWORDS = frozenset({"OPENQASM", "U", "CX"})


class Token(NamedTuple):
    """A tuple, not a dataclass: the garbage collector stops tracking tuples of plain
    values, so a million tokens do not slow every later collection down."""

    kind: str
    text: str
    line: int
    column: int

    def describe(self) -> str:
        if self.kind == EOF:
            return "end of input"
        text = self.text if len(self.text) <= 40 else self.text[:37] + "..."
        if self.kind == STRING:
            return f'"{text}"'
        return f"'{text}'"


def shown(char: str) -> str:
    """A character as an error message shows it."""
    return repr(char) if char.isprintable() else f"U+{ord(char):04X}"


#: Raise a CircuitError at an index of the text (its line and column worked out).
Fail = Callable[[str, int], NoReturn]
#: What one language makes of the text at index ``i`` (not a blank, not a ``//`` comment):
#: ``read(text, i, line, column, fail)`` gives a token, or None for text that makes none (a
#: block comment; its line ends are counted), and the index after it.
ReadToken = Callable[[str, int, int, int, Fail], tuple[Token | None, int]]

# tuple.__new__ skips the named tuple's keyword-handling constructor: a third of
# tokenizing went into building tokens.
_new = tuple.__new__


def scan(text: str, file: str | None, read: ReadToken) -> Iterator[Token]:
    """The pass both OpenQASM readers share: the tokens of ``text`` one by one as they
    are read, then one EOF token. Blanks, line ends and ``//`` comments are handled here;
    ``read`` reads the rest. CircuitError on text that is no token, when it is reached.

    A generator, not a list: the parser holds only the tokens it is looking at, so a
    large program does not hold all its tokens at once (a 10 MB file makes about three
    million of them, some hundreds of bytes each)."""
    # A lone CR (old Mac line ends) ends a line too, so that it ends a comment as well.
    if "\r" in text:
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    n = len(text)
    i = 0
    line = 1
    line_start = 0  # index of the first character of the current line

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
        if ch == "/" and i + 1 < n and text[i + 1] == "/":
            end = text.find("\n", i)
            i = n if end < 0 else end
            continue
        token, end = read(text, i, line, i - line_start + 1, fail)
        if token is not None:
            yield token
        else:
            last = text.rfind("\n", i, end)
            if last >= 0:  # line ends inside a block comment still count
                line += text.count("\n", i, last + 1)
                line_start = last + 1
        i = end
    yield Token(EOF, "", line, n - line_start + 1)


def string_token(text: str, i: int, line: int, col: int, fail: Fail) -> tuple[Token, int]:
    """The string literal opening at ``i`` (closed by the same quote on the same line)."""
    quote = text[i]
    j = text.find(quote, i + 1)
    if j < 0 or text.find("\n", i + 1, j) >= 0:
        fail(f"unterminated string: expected {quote!r} before the end of the line", i)
    return _new(Token, (STRING, text[i + 1 : j], line, col)), j + 1


def tokenize(text: str, file: str | None) -> Iterator[Token]:
    """The tokens of ``text`` followed by one EOF token, as they are read (see
    :func:`scan`); CircuitError on a bad character."""
    return scan(text, file, _read)


def _read(text: str, i: int, line: int, col: int, fail: Fail) -> tuple[Token | None, int]:
    n = len(text)
    ch = text[i]
    if ch in _ID_START:
        j = i + 1
        while j < n and text[j] in _ID_CHARS:
            j += 1
        word = text[i:j]
        if not ("a" <= ch <= "z") and word not in _UPPER_KEYWORDS:
            fail(f"identifier '{word[:40]}' must start with a lowercase letter", i)
        return _new(Token, (ID, word, line, col)), j
    if ch in _DIGITS or (ch == "." and i + 1 < n and text[i + 1] in _DIGITS):
        j = i
        while j < n and text[j] in _DIGITS:
            j += 1
        kind = INT
        if j < n and text[j] == ".":
            kind = REAL
            j += 1
            while j < n and text[j] in _DIGITS:
                j += 1
        if j < n and text[j] in "eE":
            k = j + 1
            if k < n and text[k] in "+-":
                k += 1
            if k >= n or text[k] not in _DIGITS:
                fail("malformed number: expected digits after the exponent", k)
            while k < n and text[k] in _DIGITS:
                k += 1
            kind = REAL
            j = k
        if j - i > MAX_LITERAL_LENGTH:
            fail(f"number literal longer than {MAX_LITERAL_LENGTH} characters", i)
        return _new(Token, (kind, text[i:j], line, col)), j
    if ch in _SINGLE:
        return _new(Token, (SYMBOL, ch, line, col)), i + 1
    if ch == "-":
        if i + 1 < n and text[i + 1] == ">":
            return _new(Token, (SYMBOL, "->", line, col)), i + 2
        return _new(Token, (SYMBOL, "-", line, col)), i + 1
    if ch == "=":
        if i + 1 < n and text[i + 1] == "=":
            return _new(Token, (SYMBOL, "==", line, col)), i + 2
        fail("expected '==' (OpenQASM 2.0 has no assignment)", i)
    if ch == '"':
        return string_token(text, i, line, col, fail)
    fail(f"unexpected character {shown(ch)}", i)


class TokenStream:
    """A cursor over tokens as the lexer reads them, with the error reporting every parse
    step needs. It holds the current token, the one before it (for errors after a line's
    last token) and whatever was looked ahead at, nothing more."""

    __slots__ = ("_ahead", "_tokens", "current", "file", "pos", "prev")

    def __init__(self, tokens: Iterable[Token], file: str | None) -> None:
        self._tokens = iter(tokens)
        self._ahead: deque[Token] = deque()
        self.current: Token = next(self._tokens, _new(Token, (EOF, "", 1, 1)))
        self.prev: Token | None = None
        self.pos = 0  # tokens consumed so far
        self.file = file

    def peek(self) -> Token:
        return self.current

    def ahead(self) -> Token:
        """The token after the current one (EOF at the end)."""
        if self.current.kind == EOF:
            return self.current
        if not self._ahead:
            self._ahead.append(next(self._tokens))
        return self._ahead[0]

    def peek_is(self, text: str) -> bool:
        tok = self.current
        return tok.text == text and tok.kind in (SYMBOL, ID)

    def _next(self) -> None:
        self.prev = self.current
        self.pos += 1
        self.current = self._ahead.popleft() if self._ahead else next(self._tokens)

    def advance(self) -> Token:
        tok = self.current
        if tok.kind != EOF:
            self._next()
        return tok

    def accept(self, text: str) -> bool:
        if self.peek_is(text):
            self._next()
            return True
        return False

    def expect(self, text: str) -> Token:
        tok = self.current
        if tok.text == text and tok.kind in (SYMBOL, ID):
            self._next()
            return tok
        self.fail_expected(f"'{text}'")

    def expect_kind(self, kind: str, what: str) -> Token:
        tok = self.current
        if tok.kind == kind:
            self._next()
            return tok
        self.fail_expected(what)

    def fail_expected(self, what: str) -> NoReturn:
        """Report a missing token where it is missing: a forgotten ';' (or anything at the
        end of the input) is reported right after the line's last token, not at the next
        line; a wrong word is reported where it stands."""
        tok = self.current
        message = f"expected {what}, found {tok.describe()}"
        missing_punctuation = what.startswith("'") or tok.kind == EOF
        prev = self.prev
        if prev is not None and missing_punctuation and prev.line != tok.line:
            width = len(prev.text) + (2 if prev.kind == STRING else 0)
            raise CircuitError(message, file=self.file, line=prev.line, column=prev.column + width)
        self.fail(message, tok)

    def fail(self, message: str, tok: Token) -> NoReturn:
        raise CircuitError(message, file=self.file, line=tok.line, column=tok.column)
