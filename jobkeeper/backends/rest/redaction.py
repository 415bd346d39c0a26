"""Keeping secrets out of what jobkeeper stores: every text that came from a device (an
error message, a status message, metadata, a calibration snapshot) passes through a
:class:`Redactor` before it is kept, logged or raised.

A device may echo a secret not as it was sent but transformed: lower- or upper-cased,
percent-encoded (RFC 3986 §2.1, either hex case, ``+`` for spaces as in forms),
hex-encoded, or base64-encoded (RFC 4648 §4 and the URL-safe alphabet of §5), alone or
inside a longer encoded string (``base64("Bearer " + token)``, as a device that echoes its
``Authorization`` header would). Each of these forms is replaced by ``[redacted]``.

For base64 inside a longer string, the secret's bytes can start at any of three offsets
within a 3-byte group; for each offset only the characters that depend on the secret's
bytes alone are matched (the first and last groups mix in unknown neighbours). Those
stretches are at least ``len(secret) * 4 / 3 - 6`` characters long, so secrets of a few
characters are matched only as whole encodings.
"""

from __future__ import annotations

import base64
import binascii
import re
from collections.abc import Iterable, Mapping
from typing import Any
from urllib.parse import quote, quote_plus

REDACTED = "[redacted]"
#: base64 stretches shorter than this are not matched inside longer text (they could
#: occur by chance); the whole encoding of the secret is always matched.
_MIN_FRAGMENT = 8


def _base64_forms(raw: bytes) -> set[str]:
    forms: set[str] = set()
    for encode in (base64.b64encode, base64.urlsafe_b64encode):
        whole = encode(raw).decode("ascii")
        forms.update({whole, whole.rstrip("=")})
        for offset in range(3):
            # the secret preceded by `offset` unknown bytes: characters of groups that
            # hold only the secret's bytes are fixed whatever surrounds it
            text = encode(b"\0" * offset + raw).decode("ascii")
            start = 4 if offset else 0
            end = 4 * ((offset + len(raw)) // 3)
            fragment = text[start:end]
            if len(fragment) >= _MIN_FRAGMENT:
                forms.add(fragment)
    return forms


def _folded_forms(secret: str) -> set[str]:
    """Forms matched regardless of letter case."""
    raw = secret.encode("utf-8")
    return {
        secret,
        quote(secret, safe=""),
        quote_plus(secret, safe=""),
        quote(secret, safe="/"),
        binascii.hexlify(raw).decode("ascii"),
    }


class Redactor:
    """Replaces each given secret, and its encodings, by ``[redacted]``."""

    def __init__(self, secrets: Iterable[str | None] = ()) -> None:
        self._secrets: list[str] = []
        self._folded: re.Pattern[str] | None = None
        self._exact: re.Pattern[str] | None = None
        for secret in secrets:
            self.add(secret)

    def add(self, secret: str | None) -> None:
        """Redact ``secret`` too from now on (empty and known secrets are ignored)."""
        if not secret or secret in self._secrets:
            return
        self._secrets.append(secret)
        folded: set[str] = set()
        exact: set[str] = set()
        for known in self._secrets:
            folded |= _folded_forms(known)
            exact |= _base64_forms(known.encode("utf-8"))
        # longest first, so that a form is not half-replaced by one of its parts
        self._folded = _alternation(folded, re.IGNORECASE)
        self._exact = _alternation(exact, 0)

    def text(self, text: str) -> str:
        """``text`` with every secret and encoding of one replaced."""
        if self._folded is not None:
            text = self._folded.sub(REDACTED, text)
        if self._exact is not None:
            text = self._exact.sub(REDACTED, text)
        return text

    def document(self, value: Any) -> Any:
        """A JSON-like value with every string (keys too) passed through :meth:`text`."""
        if isinstance(value, str):
            return self.text(value)
        if isinstance(value, Mapping):
            return {self.text(str(k)): self.document(v) for k, v in value.items()}
        if isinstance(value, list | tuple):
            return [self.document(item) for item in value]
        return value

    def holds_secret(self, text: str) -> bool:
        return self.text(text) != text


def _alternation(forms: set[str], flags: int) -> re.Pattern[str] | None:
    ordered = sorted((f for f in forms if f), key=lambda f: (-len(f), f))
    if not ordered:
        return None
    return re.compile("|".join(re.escape(f) for f in ordered), flags)


def redact(text: str, secret: str | None) -> str:
    """``text`` with ``secret`` and its encodings replaced (see :class:`Redactor`)."""
    return Redactor([secret]).text(text) if secret else text
