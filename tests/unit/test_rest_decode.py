"""Decoding a device's outcomes into counts, against counts worked out by hand.

Bit-order conventions (common practice): with "c0_right" the rightmost character of a bit
string is c[0], which is how OpenQASM 2 writes a register's value (its specification's
examples print c[0] last); with "c0_left" the leftmost character is c[0]. An integer's
bit k is c[k] under c0_right; under c0_left its binary digits, written out to the width,
start with c[0]."""

from __future__ import annotations

import pytest

from jobkeeper.backends.rest.decode import (
    DecodeError,
    decode_counts,
    decode_samples,
    register_layout,
    shot_key,
)
from jobkeeper.counts import count_key

ONE = register_layout([3])  # creg c[3]
TWO = register_layout([2, 1])  # creg a[2]; creg b[1];  (a = c0, c1; b = c2)

# One outcome worked by hand: c[0] = 1, c[1] = 0, c[2] = 0 (the integer 1).
# In our keys (c[0] rightmost) it is "001".
C0_SET = {
    ("bitstrings", "c0_right"): "001",
    ("bitstrings", "c0_left"): "100",
    ("integers", "c0_right"): 1,
    ("integers", "c0_left"): 4,  # digits "100", c[0] first
    ("hex", "c0_right"): "0x1",
    ("hex", "c0_left"): "0x4",
    ("bit_arrays", "c0_right"): [0, 0, 1],
    ("bit_arrays", "c0_left"): [1, 0, 0],
}


@pytest.mark.parametrize(("form", "value"), list(C0_SET.items()))
def test_one_outcome_in_every_encoding_and_order(form: tuple[str, str], value: object) -> None:
    encoding, order = form
    assert shot_key(value, encoding, order, ONE) == "001"  # type: ignore[arg-type]


def test_counts_by_each_key_encoding_both_orders() -> None:
    # 100 shots: c = (c0,c1,c2) = (1,1,0) 60 times [integer 3], (0,0,1) 40 times [integer 4]
    expected = {"011": 60, "100": 40}
    assert decode_counts({"011": 60, "100": 40}, "bitstrings", "c0_right", ONE) == expected
    assert decode_counts({"110": 60, "001": 40}, "bitstrings", "c0_left", ONE) == expected
    assert decode_counts({"3": 60, "4": 40}, "integers", "c0_right", ONE) == expected
    assert decode_counts({"6": 60, "1": 40}, "integers", "c0_left", ONE) == expected
    assert decode_counts({"0x3": 60, "0x4": 40}, "hex", "c0_right", ONE) == expected
    assert decode_counts({"0x6": 60, "0X1": 40}, "hex", "c0_left", ONE) == expected


def test_samples_aggregate_into_counts() -> None:
    samples = ["0x3", "0x4", "0x3", "0x03", "0x0"]
    assert decode_samples(samples, "hex", "c0_right", ONE) == {"011": 3, "100": 1, "000": 1}
    arrays = [[1, 1, 0], [0, 0, 1], [1, 1, 0]]
    assert decode_samples(arrays, "bit_arrays", "c0_left", ONE) == {"011": 2, "100": 1}
    assert decode_samples([3, 4, 3], "integers", "c0_right", ONE) == {"011": 2, "100": 1}


def test_several_registers_are_split_by_the_layout() -> None:
    # a = c[0..1], b = c[2]; shot: a = 01 (c0 = 1, c1 = 0), b = 1 (c2 = 1): integer 5
    key = count_key([1, 0, 1], TWO)
    assert key == "01|1"  # DESIGN (count keys): a first, "|", then b; worked out by hand
    assert shot_key(5, "integers", "c0_right", TWO) == key
    assert shot_key("0x5", "hex", "c0_right", TWO) == key
    assert shot_key("101", "bitstrings", "c0_right", TWO) == key
    assert shot_key("1 01", "bitstrings", "c0_right", TWO) == key  # spaces are ignored
    assert shot_key("101", "bitstrings", "c0_left", TWO) == key  # c0 c1 c2 = 1 0 1
    assert shot_key([1, 0, 1], "bit_arrays", "c0_left", TWO) == key
    # the key has one character per bit and one separator per register boundary
    assert len(key) == 3 + 1 and sorted(key.replace(" ", "").replace("|", "")) == ["0", "1", "1"]


@pytest.mark.parametrize(
    ("value", "encoding", "reason"),
    [
        ("0101", "bitstrings", "has 4 bits; the circuit has 3"),
        ("012", "bitstrings", "is not a bit string"),
        ("8", "integers", "does not fit in 3 classical bits"),
        ("-1", "integers", "not a non-negative decimal integer"),
        ("03", "integers", "not a non-negative decimal integer"),
        (True, "integers", "not a non-negative decimal integer"),
        ("3", "hex", "not a hexadecimal integer"),
        ("0x8", "hex", "does not fit in 3 classical bits"),
        ([1, 2, 0], "bit_arrays", "not an array of 0 and 1"),
        ([1, 0], "bit_arrays", "has 2 bits; the circuit has 3"),
    ],
)
def test_undecodable_outcomes_are_named(value: object, encoding: str, reason: str) -> None:
    with pytest.raises(DecodeError, match=reason):
        shot_key(value, encoding, "c0_right", ONE)  # type: ignore[arg-type]


def test_counts_must_be_counts() -> None:
    with pytest.raises(DecodeError, match="is not a count"):
        decode_counts({"0x1": -1}, "hex", "c0_right", ONE)
    with pytest.raises(DecodeError, match="not a list"):
        decode_samples({"0x1": 1}, "hex", "c0_right", ONE)
