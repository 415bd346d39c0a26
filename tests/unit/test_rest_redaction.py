"""Redaction of secrets and of the encodings a device may echo them in."""

from __future__ import annotations

import base64
from urllib.parse import quote, quote_plus

import pytest

from jobkeeper.backends.rest.redaction import REDACTED, Redactor, redact

SECRET = "Tok/en+Secret=42 xyz"


def test_plain_and_case_changed_forms() -> None:
    redactor = Redactor([SECRET])
    for form in (SECRET, SECRET.lower(), SECRET.upper()):
        assert redactor.text(f"said <{form}>") == f"said <{REDACTED}>"


@pytest.mark.parametrize(
    "form",
    [
        # RFC 3986 §2.1: percent-encoding, uppercase hex recommended, lowercase equivalent
        quote(SECRET, safe=""),
        quote(SECRET, safe="").lower(),
        # application/x-www-form-urlencoded (HTML spec): spaces as '+'
        quote_plus(SECRET, safe=""),
        SECRET.encode().hex(),
        SECRET.encode().hex().upper(),
        # RFC 4648 §4 and §5 (URL- and filename-safe alphabet), with and without padding
        base64.b64encode(SECRET.encode()).decode(),
        base64.urlsafe_b64encode(SECRET.encode()).decode().rstrip("="),
    ],
)
def test_encoded_forms(form: str) -> None:
    assert SECRET not in form  # each is a real disguise
    assert Redactor([SECRET]).text(f"x {form} y") == f"x {REDACTED} y"


@pytest.mark.parametrize("prefix", ["", "B", "Be", "Bearer ", "Basic user:"])
def test_base64_of_a_longer_text_holding_the_secret(prefix: str) -> None:
    # the secret at each of the three offsets within a base64 group (RFC 4648 §4)
    echoed = base64.b64encode(f"{prefix}{SECRET} and more".encode()).decode()
    redacted = Redactor([SECRET]).text(echoed)
    assert REDACTED in redacted
    # what is left cannot be decoded back to the secret
    assert len(redacted.replace(REDACTED, "")) < len(echoed) - len(SECRET)


def test_several_secrets_and_documents() -> None:
    redactor = Redactor(["first-secret-1", None, ""])
    redactor.add("second-secret-2")
    document = {"a": ["FIRST-SECRET-1", {"second-secret-2": 3}], "n": 1.5}
    assert redactor.document(document) == {"a": [REDACTED, {REDACTED: 3}], "n": 1.5}
    assert redactor.holds_secret("xx second-secret-2")
    assert not redactor.holds_secret("nothing here")


def test_short_secrets_do_not_eat_ordinary_base64() -> None:
    # a 4-character secret has no fixed base64 stretch of 8 characters: only its whole
    # encodings are matched, so ordinary text survives
    assert redact("aGVsbG8gd29ybGQ=", "abcd") == "aGVsbG8gd29ybGQ="
    assert redact("abcd", "abcd") == REDACTED
