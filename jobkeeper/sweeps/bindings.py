"""Values for a program's ``input`` parameters, from text (``--set NAME=VALUE``, a points
file's cells, a sweep axis), typed by the program's declarations.

A :class:`Bindings` is an ordered, read-only mapping name → :class:`Value`, in the order
the program declares its inputs. Each value keeps the text it was given exactly (what a
record shows; ``0.50`` stays ``0.50``) beside the number it means (what the program is
bound with). Types, per the declaration (OpenQASM 3 specification, "Input/output" and
"Types"; ../shared/corpus/qasm3/spec/):

- ``float`` and ``angle``: a decimal number, optionally with an exponent, finite;
- ``int``: an integer written in decimal; ``uint``: the same, not negative;
- ``bool``: ``true`` or ``false`` (bound as 1 or 0).

Every refusal is a :class:`~jobkeeper.exceptions.ConfigError` (exit 2) that names the
input.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass

from jobkeeper.exceptions import ConfigError

#: A decimal number as a person or a spreadsheet writes it: digits, an optional point,
#: an optional exponent (no hexadecimal, no underscores, no "inf" or "nan").
DECIMAL = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
INTEGER = re.compile(r"[+-]?\d+")
#: Longest value text accepted: an integer of ten thousand digits is no parameter.
MAX_TEXT = 100
NAME = re.compile(r"[A-Za-z_\u0080-\uffff][A-Za-z0-9_\u0080-\uffff]*")
BOOLEAN = {"true": 1, "false": 0}


@dataclass(frozen=True, slots=True)
class Value:
    """One input's value: ``text`` exactly as given, ``number`` what it means."""

    text: str
    number: float | int

    def __str__(self) -> str:
        return self.text


class Bindings(Mapping[str, Value]):
    """Input name → :class:`Value`, in the program's declaration order (read-only)."""

    __slots__ = ("_items",)

    def __init__(self, items: Iterable[tuple[str, Value]] = ()):
        self._items: dict[str, Value] = dict(items)

    def __getitem__(self, name: str) -> Value:
        return self._items[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self._items)

    def __len__(self) -> int:
        return len(self._items)

    def __eq__(self, other: object) -> bool:
        if isinstance(other, Bindings):
            return list(self._items.items()) == list(other._items.items())
        return NotImplemented

    def __hash__(self) -> int:
        return hash(tuple(self._items.items()))

    def __repr__(self) -> str:
        return f"Bindings({self.texts()!r})"

    def numbers(self) -> dict[str, float | int]:
        """Name → number: what :meth:`jobkeeper.circuit.Template.bind` takes."""
        return {name: value.number for name, value in self._items.items()}

    def texts(self) -> dict[str, str]:
        """Name → the value's text, as given."""
        return {name: value.text for name, value in self._items.items()}

    def describe(self) -> str:
        """``theta=0.5, n=3``: for messages and labels."""
        return ", ".join(f"{name}={value.text}" for name, value in self._items.items())


def parse_value(name: str, type_name: str, text: str, *, where: str = "") -> Value:
    """``text`` read as a value of input ``name`` declared with ``type_name``; ``where``
    starts any refusal's message (a file and line, an option)."""
    text = text.strip()
    what = f"{where}input {name} ({type_name})"
    if len(text) > MAX_TEXT:
        raise ConfigError(f"{what}: a value of {len(text)} characters is too long")
    if type_name in ("float", "angle"):
        if not DECIMAL.fullmatch(text):
            raise ConfigError(f"{what} needs a decimal number, got {text!r}")
        number = float(text)
        if not math.isfinite(number):
            raise ConfigError(f"{what}: {text} is not a finite float")
        return Value(text, number)
    if type_name in ("int", "uint"):
        if not INTEGER.fullmatch(text):
            raise ConfigError(f"{what} needs an integer, got {text!r}")
        integer = int(text)
        if type_name == "uint" and integer < 0:
            raise ConfigError(f"{what} must not be negative, got {text}")
        return Value(text, integer)
    if type_name == "bool":
        if text not in BOOLEAN:
            raise ConfigError(f"{what} needs true or false, got {text!r}")
        return Value(text, BOOLEAN[text])
    raise ConfigError(f"{what}: inputs of type {type_name} cannot be given a value")


def parse_settings(settings: Sequence[str], *, option: str = "--set") -> list[tuple[str, str]]:
    """``NAME=VALUE`` items → (name, value text) pairs, in order; a name given twice, an
    item without ``=`` or with a name that cannot be an input's is refused."""
    pairs: list[tuple[str, str]] = []
    seen: set[str] = set()
    for item in settings:
        name, sep, text = item.partition("=")
        name = name.strip()
        if not sep or not NAME.fullmatch(name):
            raise ConfigError(f"{option} takes NAME=VALUE, got {item!r}")
        if name in seen:
            raise ConfigError(f"{option} gives input {name} more than once")
        seen.add(name)
        pairs.append((name, text))
    return pairs


def check_names(inputs: Mapping[str, str], names: Iterable[str], *, where: str = "") -> None:
    """ConfigError naming every name that is no input of the program."""
    unknown = [name for name in names if name not in inputs]
    if unknown:
        known = ", ".join(inputs) or "none"
        raise ConfigError(
            f"{where}no input named {', '.join(unknown)} (the program's inputs: {known})"
        )


def complete(inputs: Mapping[str, str], given: Mapping[str, Value], *, where: str = "") -> Bindings:
    """``given`` as Bindings in declaration order; ConfigError naming each input of the
    program without a value and each name that is no input."""
    check_names(inputs, given, where=where)
    missing = [name for name in inputs if name not in given]
    if missing:
        raise ConfigError(
            f"{where}input(s) without a value: {', '.join(missing)} (give each NAME=VALUE)"
        )
    return Bindings((name, given[name]) for name in inputs)


def typed(
    inputs: Mapping[str, str], pairs: Iterable[tuple[str, str]], *, where: str = ""
) -> dict[str, Value]:
    """(name, text) pairs read per the program's declared types (names checked first)."""
    pairs = list(pairs)
    check_names(inputs, (name for name, _ in pairs), where=where)
    return {name: parse_value(name, inputs[name], text, where=where) for name, text in pairs}


def bind_settings(
    inputs: Mapping[str, str], settings: Sequence[str], *, where: str = ""
) -> Bindings:
    """Every input of a program (``inputs``: name → declared type, in declaration order,
    as :attr:`jobkeeper.circuit.Template.inputs`) from ``NAME=VALUE`` items: a name that
    is no input, an input left without a value, or a value its type cannot take is a
    ConfigError naming it (after ``where``, say the program's file name)."""
    return complete(inputs, typed(inputs, parse_settings(settings), where=where), where=where)
