"""JSON Pointer, Retry-After, Idempotency-Key values and body templates of the REST
adapter, checked against the published examples where there are some."""

from __future__ import annotations

import re
from datetime import UTC, datetime

import pytest

from jobkeeper.backends.rest.redaction import redact
from jobkeeper.backends.rest.wire import (
    PointerError,
    fill_path,
    fill_template,
    format_http_date,
    parse_retry_after,
    parse_structured_string,
    pointer_tokens,
    resolve_pointer,
    structured_string,
    template_fields,
)

# Source: RFC 6901 (JSON Pointer), §5 "JSON String Representation": the example document
# and the twelve pointers with the values they evaluate to.
RFC6901_DOCUMENT = {
    "foo": ["bar", "baz"],
    "": 0,
    "a/b": 1,
    "c%d": 2,
    "e^f": 3,
    "g|h": 4,
    "i\\j": 5,
    'k"l': 6,
    " ": 7,
    "m~n": 8,
}
RFC6901_EXAMPLES = [
    ("", RFC6901_DOCUMENT),
    ("/foo", ["bar", "baz"]),
    ("/foo/0", "bar"),
    ("/", 0),
    ("/a~1b", 1),
    ("/c%d", 2),
    ("/e^f", 3),
    ("/g|h", 4),
    ("/i\\j", 5),
    ('/k"l', 6),
    ("/ ", 7),
    ("/m~0n", 8),
]


@pytest.mark.parametrize(("pointer", "expected"), RFC6901_EXAMPLES)
def test_json_pointer_rfc6901_section5_examples(pointer: str, expected: object) -> None:
    # Source: RFC 6901 §5 (each pointer and its value as printed there).
    assert resolve_pointer(RFC6901_DOCUMENT, pointer) == expected


def test_json_pointer_unescapes_tilde_one_before_tilde_zero() -> None:
    # Source: RFC 6901 §4: "~01" must become "~1", not "/" (transform ~1 first, then ~0).
    assert pointer_tokens("/~01") == ["~1"]
    assert resolve_pointer({"~1": "right", "/": "wrong"}, "/~01") == "right"


@pytest.mark.parametrize(
    "pointer",
    [
        "/foo/2",  # past the end
        "/foo/-",  # RFC 6901 §4: "-" names a nonexistent element
        "/foo/01",  # leading zeros are not array indices (§4 ABNF)
        "/missing",
        "/foo/0/x",  # a string has no members
    ],
)
def test_json_pointer_names_what_is_missing(pointer: str) -> None:
    with pytest.raises(PointerError, match=re.escape(repr(pointer))):
        resolve_pointer(RFC6901_DOCUMENT, pointer)


@pytest.mark.parametrize("pointer", ["foo", "/a~2b", "/a~"])
def test_json_pointer_malformed(pointer: str) -> None:
    with pytest.raises(PointerError):
        pointer_tokens(pointer)


# --------------------------------------------------------------------------- Retry-After


def test_retry_after_delta_seconds() -> None:
    # Source: RFC 9110 §10.2.3, example "Retry-After: 120" (delay-seconds).
    assert parse_retry_after("120") == 120.0
    assert parse_retry_after(" 0 ") == 0.0


def test_retry_after_http_date() -> None:
    # Source: RFC 9110 §10.2.3, example "Retry-After: Fri, 31 Dec 1999 23:59:59 GMT".
    now = datetime(1999, 12, 31, 23, 58, 59, tzinfo=UTC)
    assert parse_retry_after("Fri, 31 Dec 1999 23:59:59 GMT", now=now) == 60.0


def test_retry_after_obsolete_date_forms() -> None:
    # Source: RFC 9110 §5.6.7: recipients accept the obsolete RFC 850 and asctime forms;
    # the three spellings of the same instant are the section's own examples.
    now = datetime(1994, 11, 6, 8, 49, 0, tzinfo=UTC)
    for text in (
        "Sun, 06 Nov 1994 08:49:37 GMT",
        "Sunday, 06-Nov-94 08:49:37 GMT",
        "Sun Nov  6 08:49:37 1994",
    ):
        assert parse_retry_after(text, now=now) == 37.0, text


def test_retry_after_past_date_is_now_and_junk_is_none() -> None:
    now = datetime(2000, 1, 1, tzinfo=UTC)
    assert parse_retry_after("Fri, 31 Dec 1999 23:59:59 GMT", now=now) == 0.0
    for junk in (None, "", "soon", "-5", "1.5", "١٢"):  # the last: Arabic-Indic digits
        assert parse_retry_after(junk, now=now) is None, junk


def test_http_date_round_trip() -> None:
    when = datetime(2026, 3, 1, 12, 0, 5, tzinfo=UTC)
    text = format_http_date(when)
    assert text == "Sun, 01 Mar 2026 12:00:05 GMT"
    assert parse_retry_after(text, now=datetime(2026, 3, 1, 12, 0, 0, tzinfo=UTC)) == 5.0


# --------------------------------------------------------------------------- Idempotency-Key


def test_idempotency_key_is_a_structured_string() -> None:
    # Source: IETF draft-ietf-httpapi-idempotency-key-header: the field is an RFC 8941
    # Item whose value is a String; RFC 8941 §3.3.3: quoted, with \ and " escaped.
    assert structured_string("sha256:ab12") == '"sha256:ab12"'
    assert structured_string('a"b\\c') == '"a\\"b\\\\c"'
    assert parse_structured_string('"a\\"b\\\\c"') == 'a"b\\c'
    assert parse_structured_string("bare-token") == "bare-token"
    with pytest.raises(ValueError):
        structured_string("é")


# --------------------------------------------------------------------------- templates

VALUES = {
    "circuit": "OPENQASM 2.0;",
    "shots": 100,
    "seed": None,
    "exact": False,
    "client_key": "sha256:00",
    "options": {"level": 2},
}


def test_whole_placeholder_keeps_the_type() -> None:
    template = {
        "program": "{circuit}",
        "shots": "{shots}",
        "seed": "{seed}",
        "exact": "{exact}",
        "options": "{options}",
        "fixed": 3,
    }
    assert fill_template(template, VALUES) == {
        "program": "OPENQASM 2.0;",
        "shots": 100,
        "seed": None,
        "exact": False,
        "options": {"level": 2},
        "fixed": 3,
    }


def test_placeholder_in_text_is_written_as_text() -> None:
    template = {"note": "{shots} shots, seed {seed}, exact {exact}, {{literal}}"}
    assert fill_template(template, VALUES) == {"note": "100 shots, seed , exact false, {literal}"}


def test_nested_bodies_and_lists() -> None:
    template = {"run": {"items": ["{client_key}", {"n": "{shots}"}]}}
    assert fill_template(template, VALUES) == {"run": {"items": ["sha256:00", {"n": 100}]}}


def test_template_fields_refuse_format_specs() -> None:
    assert template_fields("/v1/{handle}/x") == ["handle"]
    with pytest.raises(ValueError):
        template_fields("{shots:>5}")
    with pytest.raises(ValueError):
        template_fields("{shots!r}")


def test_path_handle_is_one_encoded_segment() -> None:
    assert fill_path("/v1/jobs/{handle}/result", handle="a/b c") == "/v1/jobs/a%2Fb%20c/result"


def test_redact() -> None:
    assert redact("bad token s3cret!", "s3cret") == "bad token [redacted]!"
    assert redact("nothing", None) == "nothing"
