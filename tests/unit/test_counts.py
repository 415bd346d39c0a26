"""CountTable: big count tables as arrays, read as a mapping, written as RFC 8785 JSON."""

from __future__ import annotations

import pickle

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from jobkeeper.counts import CountTable
from jobkeeper.hashing import canonical_json, reference_canonical_json


def rows_of(keys: list[str]) -> np.ndarray:
    return np.frombuffer("".join(keys).encode(), dtype=np.uint8).reshape(len(keys), -1)


@st.composite
def tables(draw: st.DrawFn) -> tuple[list[list[tuple[str, int]]], dict[str, int]]:
    """Parts of a table (lists of key and count; keys may repeat across and within
    parts) and the dict they add up to."""
    width = draw(st.integers(1, 70))  # past 64 bits: rows longer than one sorting word
    alphabet = st.sampled_from("01 ")
    key = st.lists(alphabet, min_size=width, max_size=width).map("".join)
    parts = draw(
        st.lists(
            st.lists(st.tuples(key, st.integers(1, 2**53 - 1)), min_size=0, max_size=30),
            min_size=1,
            max_size=3,
        )
    )
    total: dict[str, int] = {}
    for part in parts:
        for k, v in part:
            total[k] = total.get(k, 0) + v
    return parts, total


@settings(max_examples=300, deadline=None)
@given(tables())
def test_a_table_is_the_dict_its_rows_add_up_to(case) -> None:  # type: ignore[no-untyped-def]
    parts, total = case
    arrays = [
        (rows_of([k for k, _ in part]) if part else np.empty((0, 0), np.uint8),
         np.array([v for _, v in part], dtype=np.int64))
        for part in parts
    ]  # fmt: skip
    table = CountTable.from_parts(arrays)
    assert table.to_dict() == total
    assert len(table) == len(total) and set(table) == set(total)
    assert table == total
    if all(v <= 2**53 - 1 for v in total.values()):  # beyond, neither is canonical JSON
        # Reference: the rfc8785 package (reproduces RFC 8785's published outputs).
        assert table.canonical_json() == reference_canonical_json(total)
        assert canonical_json({"counts": table, "n": 1}) == reference_canonical_json(
            {"counts": total, "n": 1}
        )


def test_reading_and_pickling() -> None:
    table = CountTable(rows_of(["01|1", "00|0", "11|1"]), np.array([5, 7, 1]))
    assert table["00|0"] == 7 and "11|1" in table and "10|1" not in table
    assert list(table) == ["00|0", "01|1", "11|1"]  # canonical order
    assert table.shots == 13
    assert pickle.loads(pickle.dumps(table)) == table
    # RFC 8785 §3.2.3: members sorted by key (UTF-16 code units), no whitespace.
    assert table.canonical_json() == b'{"00|0":7,"01|1":5,"11|1":1}'
    assert CountTable(np.empty((0, 3), np.uint8), np.empty(0, np.int64)).canonical_json() == b"{}"


@pytest.mark.parametrize(
    ("rows", "values", "words"),
    [
        (rows_of(["0x"]), [1], "only '0', '1' and separators"),
        (rows_of(["01"]), [0], "from 1 to"),
        (rows_of(["01", "10"]), [1], "one row of characters per count"),
    ],
)
def test_bad_tables_are_refused(rows: np.ndarray, values: list[int], words: str) -> None:
    with pytest.raises(ValueError, match=words):
        CountTable(rows, np.array(values, dtype=np.int64))


@settings(max_examples=100, deadline=None)
@given(st.lists(st.integers(0, 2**70 - 1), min_size=2, max_size=40), st.integers(60, 70))
def test_rows_already_in_order_and_rows_with_repeats(numbers: list[int], width: int) -> None:
    # The fast path (rows already strictly ascending, as one record's outcomes come) and
    # the sorting path (a repeat breaks strict order) give the same as the reference.
    keys = [format(x, f"0{width}b") for x in sorted({x % (1 << width) for x in numbers})]
    for chosen in (keys, keys + keys[:1]):
        table = CountTable(rows_of(chosen), np.arange(1, len(chosen) + 1))
        expected: dict[str, int] = {}
        for k, v in zip(chosen, range(1, len(chosen) + 1), strict=True):
            expected[k] = expected.get(k, 0) + v
        assert table.to_dict() == expected
        assert table.canonical_json() == reference_canonical_json(expected)
