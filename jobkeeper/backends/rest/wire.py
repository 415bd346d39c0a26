"""Small wire-level pieces of the REST device adapter, free of I/O.

- JSON Pointer (RFC 6901): where a value sits in a device's JSON answer;
- ``Retry-After`` (RFC 9110 §10.2.3): delta-seconds or an HTTP-date;
- the ``Idempotency-Key`` value (IETF draft-ietf-httpapi-idempotency-key-header: an
  RFC 8941 Item whose value is a String, i.e. double-quoted);
- body and path templates with ``{placeholder}`` fields.

Redaction of secrets lives in ``redaction.py``.
"""

from __future__ import annotations

import email.utils
import math
import re
import string
from collections.abc import Mapping
from datetime import UTC, datetime
from typing import Annotated, Any
from urllib.parse import quote

from pydantic import AfterValidator

# --------------------------------------------------------------------------- JSON Pointer


class PointerError(LookupError):
    """A JSON Pointer is malformed or names nothing in the document."""


_ARRAY_INDEX = re.compile(r"0|[1-9][0-9]*")


def pointer_tokens(pointer: str) -> list[str]:
    """The reference tokens of ``pointer``, unescaped (``~1`` → ``/``, then ``~0`` → ``~``,
    in that order, RFC 6901 §4). Raises :class:`PointerError` when it is malformed."""
    if pointer == "":
        return []
    if not pointer.startswith("/"):
        raise PointerError(f"JSON Pointer {pointer!r} must be empty or start with '/'")
    tokens = pointer[1:].split("/")
    for token in tokens:
        if re.search(r"~(?![01])", token):
            raise PointerError(f"JSON Pointer {pointer!r}: '~' must be followed by 0 or 1")
    return [token.replace("~1", "/").replace("~0", "~") for token in tokens]


def _check_pointer(value: str) -> str:
    try:
        pointer_tokens(value)
    except PointerError as exc:
        raise ValueError(str(exc)) from None
    return value


#: a JSON Pointer (RFC 6901) into a device's JSON answer; "" is the whole answer.
Pointer = Annotated[str, AfterValidator(_check_pointer)]


def resolve_pointer(document: Any, pointer: str) -> Any:
    """The value ``pointer`` names in ``document`` (RFC 6901 §4). Raises
    :class:`PointerError` naming the missing part when there is no such value."""
    value = document
    walked = ""
    for token in pointer_tokens(pointer):
        walked += "/" + token.replace("~", "~0").replace("/", "~1")
        if isinstance(value, Mapping):
            if token not in value:
                raise PointerError(f"nothing at {walked!r}")
            value = value[token]
        elif isinstance(value, list):
            # "-" names the element after the last one: never an existing value.
            if not _ARRAY_INDEX.fullmatch(token) or int(token) >= len(value):
                raise PointerError(f"nothing at {walked!r} (array of {len(value)})")
            value = value[int(token)]
        else:
            raise PointerError(f"nothing at {walked!r}: {type(value).__name__} has no members")
    return value


# --------------------------------------------------------------------------- Retry-After


def parse_retry_after(value: str | None, *, now: datetime | None = None) -> float | None:
    """Seconds to wait from a ``Retry-After`` value, or None when absent or unreadable.

    RFC 9110 §10.2.3: ``Retry-After = HTTP-date / delay-seconds``, where delay-seconds is
    a non-negative decimal integer. A date in the past means "now" (0 seconds).
    """
    if value is None:
        return None
    text = value.strip()
    if text.isdigit() and text.isascii():
        return float(int(text))
    try:
        when = email.utils.parsedate_to_datetime(text)
    except (TypeError, ValueError, IndexError):
        return None
    if when.tzinfo is None:
        # RFC 9110 §5.6.7: HTTP-dates are in GMT; obsolete forms parse as naive.
        when = when.replace(tzinfo=UTC)
    current = now if now is not None else datetime.now(UTC)
    seconds = (when - current).total_seconds()
    return max(0.0, seconds) if math.isfinite(seconds) else None


def format_http_date(when: datetime) -> str:
    """An IMF-fixdate (RFC 9110 §5.6.7), e.g. ``Sun, 06 Nov 1994 08:49:37 GMT``."""
    return email.utils.format_datetime(when.astimezone(UTC), usegmt=True)


# --------------------------------------------------------------------------- Idempotency-Key


def structured_string(value: str) -> str:
    """``value`` as an RFC 8941 §3.3.3 sf-string: quoted, with ``\\`` and ``"`` escaped.
    Only printable ASCII can travel in one; anything else is refused."""
    if not all(" " <= ch <= "~" for ch in value):
        raise ValueError("an idempotency key must be printable ASCII")
    return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'


def parse_structured_string(value: str) -> str:
    """The inverse of :func:`structured_string`; a bare token is taken as it is."""
    text = value.strip()
    if len(text) >= 2 and text[0] == '"' and text[-1] == '"':
        return re.sub(r"\\(.)", r"\1", text[1:-1])
    return text


# --------------------------------------------------------------------------- templates

#: placeholders a submit body may hold, with the type each is substituted as.
BODY_FIELDS = frozenset({"circuit", "shots", "seed", "exact", "client_key", "options"})
#: placeholders a path may hold.
PATH_FIELDS = frozenset({"handle"})

_FORMATTER = string.Formatter()


def template_fields(text: str) -> list[str]:
    """The placeholder names in ``text`` (``{{``/``}}`` are literal braces). Raises
    ValueError for a conversion or format spec: templates substitute values, nothing else."""
    names: list[str] = []
    for _literal, name, spec, conversion in _FORMATTER.parse(text):
        if name is None:
            continue
        if spec or conversion or not name.isidentifier():
            raise ValueError(f"placeholder {{{name}}} in {text!r} must be a plain name")
        names.append(name)
    return names


def template_strings(template: Any) -> list[str]:
    """Every string (keys and values) inside a JSON-like template."""
    if isinstance(template, str):
        return [template]
    if isinstance(template, Mapping):
        found: list[str] = []
        for key, item in template.items():
            found.append(str(key))
            found.extend(template_strings(item))
        return found
    if isinstance(template, list):
        return [text for item in template for text in template_strings(item)]
    return []


def _as_text(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    return str(value)


def _fill_string(text: str, values: Mapping[str, Any]) -> Any:
    parsed = list(_FORMATTER.parse(text))
    if len(parsed) == 1 and parsed[0][0] == "" and parsed[0][1] is not None:
        # the whole string is one placeholder: substitute the value with its type kept
        return values[parsed[0][1]]
    pieces: list[str] = []
    for literal, name, _spec, _conversion in parsed:
        pieces.append(literal)
        if name is not None:
            pieces.append(_as_text(values[name]))
    return "".join(pieces)


def fill_template(template: Any, values: Mapping[str, Any]) -> Any:
    """``template`` (a JSON-like value from a profile) with its placeholders filled.

    A string that is exactly one placeholder, e.g. ``"{shots}"``, becomes the value itself
    with its JSON type (an integer, ``null``, an object, ...); a placeholder inside longer
    text is written into it as text. Keys are filled as text.
    """
    if isinstance(template, str):
        return _fill_string(template, values)
    if isinstance(template, Mapping):
        return {
            str(_fill_string(str(key), values)): fill_template(item, values)
            for key, item in template.items()
        }
    if isinstance(template, list):
        return [fill_template(item, values) for item in template]
    return template


def fill_path(template: str, *, handle: str | None = None, whole_path: bool = False) -> str:
    """A request path with ``{handle}`` filled in, percent-encoded as one path segment
    (or, with ``whole_path``, as the path it is: a handle taken from a Location's path)."""
    if handle is None:
        encoded = ""
    elif whole_path:
        encoded = quote(handle, safe="/%:@!$&'()*+,;=-._~")
    else:
        encoded = quote(handle, safe="")
    return template.format_map({"handle": encoded})
