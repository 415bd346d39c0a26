"""The fast RFC 8785 path must give exactly the reference implementation's bytes."""

from __future__ import annotations

from typing import Any

import pytest
import rfc8785
from hypothesis import given, settings
from hypothesis import strategies as st

from jobkeeper.hashing import canonical_json as fast
from jobkeeper.hashing import reference_canonical_json as reference

# Differential property (reference: the rfc8785 package, which reproduces the RFC 8785
# author's published test outputs, see test_provenance_jcs.py).
scalars = (
    st.none()
    | st.booleans()
    | st.integers(-(2**53) + 1, 2**53 - 1)
    | st.floats(allow_nan=False, allow_infinity=False)
    | st.text()
    | st.text(alphabet=st.characters(max_codepoint=0x7F))
)
values = st.recursive(
    scalars,
    lambda inner: (
        st.lists(inner, max_size=4)
        | st.dictionaries(
            st.text(max_size=6) | st.sampled_from(["a", "b", "\x7f", "é"]), inner, max_size=4
        )
    ),
    max_leaves=12,
)


@settings(max_examples=200, deadline=None)
@given(values)
def test_fast_path_equals_reference(value: Any) -> None:
    assert fast(value) == reference(value)


def test_typical_documents() -> None:
    counts = {"110": 3, "000": 480, "1 01": 2, "111": 515}
    assert fast(counts) == reference(counts) == b'{"000":480,"1 01":2,"110":3,"111":515}'
    envelope = {
        "payload": "ab+/==",
        "payloadType": "application/vnd.in-toto+json",
        "signatures": [{"keyid": "k", "sig": "x"}],
    }
    assert fast(envelope) == reference(envelope)
    for odd in ({"f": 1.5}, {"u": "\u2014"}, {"\U0001f602": 1, "\ufb33": 2}, {"d": "\x7f"}):
        assert fast(odd) == reference(odd)
    # Outside the I-JSON domain both refuse, with the reference's error.
    with pytest.raises(rfc8785.IntegerDomainError):
        fast({"big": 2**60})


@settings(max_examples=500, deadline=None)
@given(st.floats(allow_nan=False, allow_infinity=False))
def test_floats_equal_the_reference(value: float) -> None:
    # Floats take the fast path where Python writes no exponent: the reference decides.
    assert fast(value) == reference(value)
    assert fast([value, -value]) == reference([value, -value])


@pytest.mark.parametrize(
    "value", [0.0, -0.0, 1.0, -2.5, 1e-4, 9.999e-5, 1e15, 1e16, 1e21, 123456789.125, 0.1 + 0.2]
)
def test_float_edges_equal_the_reference(value: float) -> None:
    assert fast(value) == reference(value)
