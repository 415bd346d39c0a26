"""Outcomes in a device's own encoding turned into jobkeeper's counts.

A device may key its counts by bit strings in either bit order, by decimal integers or by
hexadecimal integers (``"0x3"``), or send per-shot samples (a list of bit strings,
integers, hexadecimal strings or arrays of 0/1), which are aggregated into counts here.
Every form is first read into the classical values of one shot (``bits[c]`` = classical
bit c, the width being the circuit's classical bits), and the count key is then written by
:func:`jobkeeper.counts.count_key`, the function the simulators' keys follow too: so a
device's counts and a simulator's are keyed alike, registers included.

Bit order: ``c0_right`` means the rightmost character of a bit string is c[0] (an integer
is read the same way: its binary digits, most significant first, c[0] last, so bit k of
the integer is c[k]); ``c0_left`` means the leftmost character is c[0] (the integer's
binary digits written out to the width, most significant first, the first being c[0]).
For arrays of 0/1, ``c0_left`` means element 0 is c[0]; ``c0_right`` the last element.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Sequence
from typing import Any, Literal

from jobkeeper.circuit.ir import Register
from jobkeeper.counts import count_key

Encoding = Literal["bitstrings", "integers", "hex", "bit_arrays"]
BitOrder = Literal["c0_right", "c0_left"]

_BITS = re.compile(r"[01]+")
_DECIMAL = re.compile(r"0|[1-9][0-9]*")
_HEX = re.compile(r"0[xX][0-9a-fA-F]+")


class DecodeError(ValueError):
    """An outcome that does not read as the profile's encoding says."""


def register_layout(widths: Sequence[int]) -> tuple[Register, ...]:
    """Registers of the given widths in declaration order, laid out one after the other
    (as a parsed circuit lays out its classical registers)."""
    registers: list[Register] = []
    offset = 0
    for k, width in enumerate(widths):
        registers.append(Register(f"c{k}", width, offset))
        offset += width
    return tuple(registers)


def _digits(value: Any, encoding: Encoding, width: int) -> str:
    """The shot's bits as digits, most significant first (for integers), or as the device
    wrote them (bit strings, arrays)."""
    if encoding == "bit_arrays":
        if not isinstance(value, list) or any(
            isinstance(b, bool) or b not in (0, 1) for b in value
        ):
            raise DecodeError(f"{_show(value)} is not an array of 0 and 1")
        return "".join(str(b) for b in value)
    if encoding == "bitstrings":
        if not isinstance(value, str):
            raise DecodeError(f"{_show(value)} is not a bit string")
        text = value.replace(" ", "")
        if not _BITS.fullmatch(text) and not (text == "" and width == 0):
            raise DecodeError(f"{_show(value)} is not a bit string")
        return text
    number = _integer(value, encoding)
    if number >= 1 << width:
        raise DecodeError(f"{_show(value)} does not fit in {width} classical bits")
    return format(number, f"0{width}b") if width else ""


def _integer(value: Any, encoding: Encoding) -> int:
    if encoding == "integers":
        if isinstance(value, int) and not isinstance(value, bool) and value >= 0:
            return value
        if isinstance(value, str) and _DECIMAL.fullmatch(value):
            return int(value)
        raise DecodeError(f"{_show(value)} is not a non-negative decimal integer")
    if isinstance(value, str) and _HEX.fullmatch(value):
        return int(value, 16)
    raise DecodeError(f"{_show(value)} is not a hexadecimal integer like '0x3'")


def _show(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:39] + "…"


def shot_key(value: Any, encoding: Encoding, order: BitOrder, registers: Sequence[Register]) -> str:
    """The count key of one outcome written in ``encoding`` with ``order``."""
    width = sum(reg.size for reg in registers)
    digits = _digits(value, encoding, width)
    if len(digits) != width:
        raise DecodeError(f"{_show(value)} has {len(digits)} bits; the circuit has {width}")
    c0_first = digits if order == "c0_left" else digits[::-1]
    return count_key([int(d) for d in c0_first], registers)


def decode_counts(
    document: Any, encoding: Encoding, order: BitOrder, registers: Sequence[Register]
) -> dict[str, int]:
    """Counts keyed in ``encoding`` → counts keyed by count keys. Two device keys naming
    the same outcome (``"0x3"`` and ``"0x03"``) add up."""
    if not isinstance(document, dict):
        raise DecodeError(f"counts are {type(document).__name__}, not an object")
    if encoding == "bit_arrays":
        raise DecodeError("counts cannot be keyed by arrays")
    counts: Counter[str] = Counter()
    for outcome, count in document.items():
        if isinstance(count, bool) or not isinstance(count, int) or count < 0:
            raise DecodeError(f"count {_show(count)} of {_show(outcome)} is not a count")
        if count:
            counts[shot_key(outcome, encoding, order, registers)] += count
    return dict(counts)


def decode_samples(
    samples: Any, encoding: Encoding, order: BitOrder, registers: Sequence[Register]
) -> Counter[str]:
    """Per-shot samples (a list, one outcome per shot) → counts."""
    if not isinstance(samples, list):
        raise DecodeError(f"samples are {type(samples).__name__}, not a list")
    return Counter(shot_key(sample, encoding, order, registers) for sample in samples)
