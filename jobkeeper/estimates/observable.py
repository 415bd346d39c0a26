"""Observables: real-weighted sums of Pauli products, their text format, canonical form
and hash.

The text format (ours), one term per line::

    # an invented two-qubit example
    -1.05            # a coefficient alone: the identity term
    0.39 Z0
    -0.39 Z1
    0.8 Z0 Z1        # a coefficient, then Pauli factors: a letter and a qubit index
    0.18 X0 X1

Qubit indices are the circuit's qubits in declaration order (the first register's
element 0 is qubit 0). ``#`` starts a comment; blank lines are skipped; factors of one
term may come in any order; a term written twice (in any factor order) is one term with
the summed coefficient, and a term whose coefficients cancel to exactly 0 is dropped.
Coefficients are real decimal numbers (``1``, ``-0.25``, ``3e-2``): complex or
non-finite ones, unknown letters, a qubit repeated in one term, and (given the circuit)
an index past its last qubit are refused with file, line and column.

The canonical text has the identity term first (when not 0), then the other terms
ordered by their label (factors ascending by qubit), each coefficient written as the
shortest decimal that reads back as the same double (Python's ``repr``), so the text
and its hash ``sha256:<hex>`` are the same on every machine and for every way of
writing the same observable.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from fractions import Fraction
from functools import cached_property
from typing import Literal, cast

from jobkeeper.exceptions import ObservableError
from jobkeeper.hashing import sha256_tag

PauliLetter = Literal["X", "Y", "Z"]
LETTERS = frozenset("XYZ")

#: A real decimal number (no underscores, no ``inf``/``nan``, no hexadecimal).
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?\Z")
_FACTOR = re.compile(r"([A-Za-z]+)(\d+)\Z")
_TOKEN = re.compile(r"\S+")

#: Builds the error for a message, its place already bound.
Fail = Callable[[str], ObservableError]


@dataclass(frozen=True, slots=True)
class PauliTerm:
    """One Pauli product with its real coefficient. ``factors`` are (qubit, letter) pairs
    ascending by qubit; no factors is the identity."""

    factors: tuple[tuple[int, PauliLetter], ...]
    coefficient: float

    @property
    def label(self) -> str:
        """``Z0 Z1`` (factors ascending by qubit); ``I`` for the identity."""
        return label_of(self.factors)

    @property
    def qubits(self) -> tuple[int, ...]:
        return tuple(q for q, _ in self.factors)


def label_of(factors: Iterable[tuple[int, str]]) -> str:
    text = " ".join(f"{letter}{qubit}" for qubit, letter in factors)
    return text or "I"


def _sort_key(factors: tuple[tuple[int, PauliLetter], ...]) -> tuple[tuple[int, str], ...]:
    return tuple((q, letter) for q, letter in factors)


@dataclass(frozen=True)
class Observable:
    """A real-weighted sum of Pauli products: ``identity`` (the coefficient of the identity
    term) plus ``terms`` (none of them the identity, in canonical order, coefficients not
    0). Build it with :func:`parse_observable` or :func:`observable_from`."""

    terms: tuple[PauliTerm, ...]
    identity: float = 0.0
    #: where each qubit index is first named (line, column), for messages only.
    origins: Mapping[int, tuple[int, int]] = field(default_factory=dict, compare=False)
    source_name: str | None = field(default=None, compare=False)

    @cached_property
    def labels(self) -> tuple[str, ...]:
        """Each term's label, in the terms' order."""
        return tuple(term.label for term in self.terms)

    @property
    def num_qubits(self) -> int:
        """One more than the highest qubit index named (0 for the identity alone)."""
        return 1 + max((q for t in self.terms for q in t.qubits), default=-1)

    def canonical_text(self) -> str:
        return self._canonical

    @cached_property
    def _canonical(self) -> str:
        lines = [repr(self.identity)] if self.identity != 0.0 else []
        lines.extend(
            f"{t.coefficient!r} {label}" for t, label in zip(self.terms, self.labels, strict=True)
        )
        return "".join(line + "\n" for line in lines)

    def hash(self) -> str:
        """``sha256:<hex>`` of the canonical text (UTF-8)."""
        return sha256_tag(self.canonical_text().encode("utf-8"))

    def check_fits(self, num_qubits: int) -> None:
        """Refuse an index past the circuit's last qubit, naming where it is written."""
        beyond = [q for q in {q for t in self.terms for q in t.qubits} if q >= num_qubits]
        if not beyond:
            return
        first = min(beyond, key=lambda q: self.origins.get(q, (0, 0)))
        line, column = self.origins.get(first, (None, None))
        raise ObservableError(
            f"qubit {first} is past the circuit's last qubit ({num_qubits - 1}): "
            f"the circuit has {num_qubits} qubit{'s' if num_qubits != 1 else ''}",
            file=self.source_name or "<observable>",
            line=line,
            column=column,
        )


class _Collector:
    """Merges terms exactly (rational sums of the given doubles, rounded once)."""

    def __init__(self, source_name: str) -> None:
        self.source_name = source_name
        self.sums: dict[tuple[tuple[int, PauliLetter], ...], Fraction] = {}
        self.origins: dict[int, tuple[int, int]] = {}

    def add(self, factors: tuple[tuple[int, PauliLetter], ...], coefficient: float) -> None:
        self.sums[factors] = self.sums.get(factors, Fraction(0)) + Fraction(coefficient)

    def _rounded(self, factors: tuple[tuple[int, PauliLetter], ...], total: Fraction) -> float:
        try:
            return float(total)
        except OverflowError:
            raise ObservableError(
                f"the coefficients of {label_of(factors)} add up past the largest double",
                file=self.source_name,
            ) from None

    def build(self, num_qubits: int | None) -> Observable:
        identity = self._rounded((), self.sums.pop((), Fraction(0)))
        terms = tuple(
            PauliTerm(factors, self._rounded(factors, total))
            for factors, total in sorted(self.sums.items(), key=lambda kv: _sort_key(kv[0]))
            if total != 0
        )
        observable = Observable(terms, identity, dict(self.origins), self.source_name)
        if num_qubits is not None:
            observable.check_fits(num_qubits)
        return observable


def parse_observable(
    text: str, *, source_name: str | None = None, num_qubits: int | None = None
) -> Observable:
    """Read the text format (module docstring). With ``num_qubits``, indices past it are
    refused too. Raises :class:`~jobkeeper.exceptions.ObservableError`."""
    name = source_name or "<observable>"
    collector = _Collector(name)
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0]
        tokens = [(m.group(), m.start() + 1) for m in _TOKEN.finditer(line)]
        if not tokens:
            continue

        word, column = tokens[0]
        coefficient = _coefficient(word, _at(name, number, column))
        seen: dict[int, int] = {}
        factors: list[tuple[int, PauliLetter]] = []
        for word, column in tokens[1:]:
            fail = _at(name, number, column)
            qubit, letter = _factor(word, fail)
            if qubit in seen:
                raise fail(
                    f"qubit {qubit} appears twice in one term (first at column {seen[qubit]}): "
                    "a term names each qubit once"
                )
            seen[qubit] = column
            collector.origins.setdefault(qubit, (number, column))
            factors.append((qubit, letter))
        collector.add(tuple(sorted(factors)), coefficient)
    return collector.build(num_qubits)


def _at(name: str, line: int, column: int) -> Fail:
    def fail(message: str) -> ObservableError:
        return ObservableError(message, file=name, line=line, column=column)

    return fail


def observable_from(
    value: Observable | str | Mapping[str, float],
    *,
    source_name: str | None = None,
    num_qubits: int | None = None,
) -> Observable:
    """An :class:`Observable` from itself, the text format, or a mapping of labels to
    coefficients (``{"Z0 Z1": 0.8, "": -1.0}``; ``""`` or ``"I"`` is the identity)."""
    if isinstance(value, Observable):
        if num_qubits is not None:
            value.check_fits(num_qubits)
        return value
    if isinstance(value, str):
        return parse_observable(value, source_name=source_name, num_qubits=num_qubits)
    name = source_name or "<mapping>"
    collector = _Collector(name)
    for key, raw in value.items():
        if not isinstance(key, str):
            raise ObservableError(f"term {key!r}: a term's label is a string", file=name)

        fail = _for_key(name, key)
        coefficient = _real(raw, fail)
        factors: list[tuple[int, PauliLetter]] = []
        words = key.split()
        if words == ["I"]:
            words = []
        for word in words:
            qubit, letter = _factor(word, fail)
            if any(q == qubit for q, _ in factors):
                raise fail(f"qubit {qubit} appears twice: a term names each qubit once")
            collector.origins.setdefault(qubit, (0, 0))
            factors.append((qubit, letter))
        collector.add(tuple(sorted(factors)), coefficient)
    return collector.build(num_qubits)


def _for_key(name: str, key: str) -> Fail:
    def fail(message: str) -> ObservableError:
        return ObservableError(f"term {key!r}: {message}", file=name)

    return fail


def _coefficient(word: str, fail: Fail) -> float:
    if not _NUMBER.match(word):
        bare = word.lower().lstrip("+-")
        if bare in ("inf", "infinity", "nan"):
            raise fail(f"coefficient {word!r} is not finite")
        if _is_complex(word):
            raise fail(f"complex coefficient {word!r}: coefficients are real numbers")
        if _FACTOR.match(word):
            raise fail(f"expected a coefficient before the factor {word!r} (write 1 {word})")
        raise fail(f"expected a real coefficient, got {word!r}")
    value = float(word)
    if not math.isfinite(value):
        raise fail(f"coefficient {word!r} is not finite (too large for a double)")
    return value


def _is_complex(word: str) -> bool:
    # 2j, 1+2j, 0.5-1i: what complex() reads once an engineer's i is a j.
    try:
        complex(word.lower().replace("i", "j"))
    except ValueError:
        return False
    return True


def _real(raw: object, fail: Fail) -> float:
    if isinstance(raw, bool | complex | str):
        raise fail(f"coefficient {raw!r} is not a real number")
    try:
        value = float(cast(float, raw))
    except (TypeError, ValueError):
        raise fail(f"coefficient {raw!r} is not a real number") from None
    if not math.isfinite(value):
        raise fail(f"coefficient {raw!r} is not finite")
    return value


def _factor(word: str, fail: Fail) -> tuple[int, PauliLetter]:
    match = _FACTOR.match(word)
    if match is None:
        raise fail(
            f"expected a Pauli factor such as Z0 (X, Y or Z and a qubit index), got {word!r}"
        )
    letter, digits = match.groups()
    if letter not in LETTERS:
        hint = "; the identity is a coefficient alone on its line" if letter == "I" else ""
        raise fail(f"unknown Pauli letter {letter!r} in {word!r} (X, Y or Z){hint}")
    return int(digits), cast(PauliLetter, letter)
