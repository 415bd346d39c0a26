"""The observable text format, mappings, canonical text and hash (issue 15, item 1)."""

from __future__ import annotations

import re

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from jobkeeper.estimates import observable_from, parse_observable
from jobkeeper.exceptions import ObservableError

# An invented example observable.
TEXT = """\
# invented: three qubits
-1.0            # identity
0.8 Z0 Z1
0.5 X1 X0
0.5 X0 X1       # the same term again: merges to 1.0
-0.2 Y1 Y2 Z0
"""


def test_terms_merge_and_sort_into_the_canonical_text() -> None:
    observable = parse_observable(TEXT)
    assert observable.identity == -1.0
    assert [(t.label, t.coefficient) for t in observable.terms] == [
        ("X0 X1", 1.0),
        ("Z0 Y1 Y2", -0.2),
        ("Z0 Z1", 0.8),
    ]
    assert observable.canonical_text() == "-1.0\n1.0 X0 X1\n-0.2 Z0 Y1 Y2\n0.8 Z0 Z1\n"
    assert observable.num_qubits == 3
    assert re.fullmatch(r"sha256:[0-9a-f]{64}", observable.hash())


def test_the_same_observable_written_otherwise_has_the_same_hash() -> None:
    a = parse_observable(TEXT)
    b = observable_from({"Z1 Z0": 0.8, "X0 X1": 1.0, "Y2 Z0 Y1": -0.2, "": -1.0})
    c = parse_observable("0.80 Z0 Z1\n1e0 X0 X1\n-.2 Y1 Y2 Z0\n-1\n")
    assert a == b == c
    assert a.hash() == b.hash() == c.hash()
    assert a.hash() != parse_observable("0.8000001 Z0 Z1\n1 X0 X1\n-0.2 Y1 Y2 Z0\n-1").hash()


def test_merging_is_exact_and_cancelled_terms_vanish() -> None:
    # 0.1 + 0.2 rounded once from the exact sum of the two doubles (not 0.30000000000000004
    # then rounded again); a term summing to exactly 0 is dropped.
    observable = parse_observable("0.1 Z0\n0.2 Z0\n0.5 X1\n-0.5 X1\n")
    assert [(t.label, t.coefficient) for t in observable.terms] == [("Z0", 0.30000000000000004)]
    assert observable_from({"I": 2.0, "": 1.0}).identity == 3.0


@pytest.mark.parametrize(
    ("line", "column", "words"),
    [
        ("1+2j Z0", 3, "complex coefficient"),
        ("2i Z0", 3, "complex coefficient"),
        ("inf Z0", 3, "not finite"),
        ("nan", 3, "not finite"),
        ("1e999 Z0", 3, "not finite"),
        ("1 Q0", 5, "unknown Pauli letter 'Q'"),
        ("1 I0", 5, "identity is a coefficient alone"),
        ("1 Z0 X0", 8, "qubit 0 appears twice"),
        ("Z0 Z1", 3, "expected a coefficient"),
        ("1 Z", 5, "expected a Pauli factor"),
    ],
)
def test_bad_lines_name_file_line_and_column(line: str, column: int, words: str) -> None:
    with pytest.raises(ObservableError) as caught:
        parse_observable(f"0.5 Z0\n  {line}\n", source_name="h.obs")
    error = caught.value
    assert (error.file, error.line, error.column) == ("h.obs", 2, column)
    assert words in str(error)
    assert str(error).startswith(f"h.obs:2:{column}: ")
    assert error.exit_code == 2


def test_an_index_past_the_circuit_is_refused_where_it_is_first_written() -> None:
    text = "1 Z0\n0.5 X4 Z1\n0.2 Z4\n0.1 Z3\n"
    with pytest.raises(ObservableError, match=r"h\.obs:2:5: qubit 4 is past .* 4 qubits"):
        parse_observable(text, source_name="h.obs", num_qubits=4)
    parse_observable(text, num_qubits=5)


@pytest.mark.parametrize(
    ("mapping", "words"),
    [
        ({"Z0": 1j}, "not a real number"),
        ({"Z0": float("nan")}, "not finite"),
        ({"Z0": "0.5"}, "not a real number"),
        ({"Z0": True}, "not a real number"),
        ({"Z0 Z0": 1.0}, "appears twice"),
        ({"W3": 1.0}, "unknown Pauli letter"),
    ],
)
def test_bad_mappings_name_the_term(mapping: dict[str, object], words: str) -> None:
    with pytest.raises(ObservableError, match=words):
        observable_from(mapping)  # type: ignore[arg-type]


@given(
    st.dictionaries(
        st.lists(
            st.tuples(st.integers(0, 20), st.sampled_from("XYZ")),
            max_size=5,
            unique_by=lambda f: f[0],
        ).map(lambda fs: " ".join(f"{letter}{q}" for q, letter in fs)),
        st.floats(allow_nan=False, allow_infinity=False, width=64),
        max_size=12,
    )
)
@settings(max_examples=150, deadline=None)
def test_the_canonical_text_reads_back_as_the_same_observable(mapping: dict[str, float]) -> None:
    # Round trip (property): text → observable → canonical text → the same observable.
    observable = observable_from(mapping)
    again = parse_observable(observable.canonical_text())
    assert again == observable
    assert again.canonical_text() == observable.canonical_text()


def test_merged_coefficients_that_overflow_are_refused() -> None:
    with pytest.raises(ObservableError, match="add up past the largest double"):
        parse_observable("1e308 Z0 X1\n1e308 X1 Z0\n")
