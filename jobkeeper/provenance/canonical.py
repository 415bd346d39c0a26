"""A fast path to RFC 8785 canonical JSON for the plain values provenance hashes.

``jobkeeper.hashing.canonical_json`` (the rfc8785 package, pure Python) dominated log
verification: every envelope and counts document is re-canonicalised to get its leaf or
digest. For ASCII strings (without DEL), integers within ±(2^53−1), booleans, null, lists
and objects, RFC 8785 output equals what ``json.dumps`` writes for the same value with
keys sorted: ASCII sorts the same by UTF-16 code units as by code points, and the two
escape the same characters the same way. Anything else (floats, non-ASCII, DEL, big
integers) falls back to the reference implementation, so the result is always identical
to it (a differential property test holds us to that).
"""

from __future__ import annotations

import json
from typing import Any

from jobkeeper.hashing import canonical_json as reference_canonical_json

_MAX_SAFE = 2**53 - 1
_encode_str = json.encoder.encode_basestring_ascii


class _Fallback(Exception):
    pass


def _plain_str(text: str) -> str:
    if not text.isascii() or "\x7f" in text:
        raise _Fallback
    encoded: str = _encode_str(text)
    return encoded


def _dump(value: Any, out: list[str]) -> None:
    if isinstance(value, str):
        out.append(_plain_str(value))
    elif value is True:
        out.append("true")
    elif value is False:
        out.append("false")
    elif value is None:
        out.append("null")
    elif isinstance(value, int):
        if not -_MAX_SAFE <= value <= _MAX_SAFE:
            raise _Fallback
        out.append(str(int(value)))
    elif isinstance(value, dict):
        if not value:
            out.append("{}")
            return
        sep = "{"
        for key in sorted(value):
            if not isinstance(key, str):
                raise _Fallback
            out.append(sep)
            out.append(_plain_str(key))
            out.append(":")
            _dump(value[key], out)
            sep = ","
        out.append("}")
    elif isinstance(value, list | tuple):
        if not value:
            out.append("[]")
            return
        sep = "["
        for item in value:
            out.append(sep)
            _dump(item, out)
            sep = ","
        out.append("]")
    else:
        raise _Fallback


def canonical_json(value: Any) -> bytes:
    """RFC 8785 bytes of ``value``, identical to ``jobkeeper.hashing.canonical_json``."""
    out: list[str] = []
    try:
        _dump(value, out)
    except _Fallback:
        return reference_canonical_json(value)
    except RecursionError:
        return reference_canonical_json(value)
    return "".join(out).encode("ascii")
