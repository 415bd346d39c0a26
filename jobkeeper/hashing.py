"""Canonical JSON (RFC 8785) and the ``sha256:<hex>`` digests built on it."""

from __future__ import annotations

import hashlib
from typing import Any

import rfc8785


def canonical_json(value: Any) -> bytes:
    """RFC 8785 (JCS) bytes of a JSON-ready value. Integers beyond ±(2^53−1) are refused
    by the standard, so seeds and other large integers travel as strings."""
    return bytes(rfc8785.dumps(value))


def sha256_tag(data: bytes) -> str:
    """``sha256:`` + lowercase hex, the form every digest in jobkeeper takes."""
    return "sha256:" + hashlib.sha256(data).hexdigest()


def digest_of(value: Any) -> str:
    """``sha256:`` digest of the canonical JSON of ``value``."""
    return sha256_tag(canonical_json(value))
