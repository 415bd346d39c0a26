"""Reading values out of a device's JSON answers, as its profile says, with clear errors
when the answer does not have the shape the profile promises."""

from __future__ import annotations

import math
import re
from typing import Any

from jobkeeper.backends.rest.profile import DeviceProfile
from jobkeeper.backends.rest.wire import PointerError, resolve_pointer
from jobkeeper.exceptions import PermanentBackendError

#: a bit string as jobkeeper writes them: registers of 0/1 separated by single spaces.
#: a count key as jobkeeper writes it (``bit_order = "ours"``): see jobkeeper.counts
BITSTRING = re.compile(r"[01]+(\|[01]+)*")

_MISSING = object()


def mismatch(profile: DeviceProfile, op: str, detail: str) -> PermanentBackendError:
    # A 2xx answer without the promised value will not change on retry: the profile and
    # the device disagree, which a person must fix.
    return PermanentBackendError(
        f"the device's answer to the {op} request does not match profile "
        f"{profile.device.name!r}: {detail}"
    )


def pick(
    document: Any, pointer: str, op: str, profile: DeviceProfile, default: Any = _MISSING
) -> Any:
    """The value at ``pointer`` in ``document`` (or ``default`` when absent)."""
    try:
        return resolve_pointer(document, pointer)
    except PointerError as exc:
        if default is not _MISSING:
            return default
        raise mismatch(profile, op, f"{exc} (JSON Pointer {pointer!r})") from None


def pick_text(
    document: Any, pointer: str, op: str, profile: DeviceProfile, default: Any = _MISSING
) -> str:
    """The string at ``pointer`` (numbers are written as text; null is ``default``)."""
    value = pick(document, pointer, op, profile, default)
    if value is None and default is not _MISSING:
        return str(default)
    if isinstance(value, str):
        return value
    if isinstance(value, int | float) and not isinstance(value, bool):
        return str(value)
    raise mismatch(profile, op, f"expected text at {pointer!r}, found {type(value).__name__}")


def _counts(value: Any, profile: DeviceProfile) -> dict[str, int]:
    if not isinstance(value, dict):
        raise mismatch(profile, "result", f"counts are {type(value).__name__}, not an object")
    counts: dict[str, int] = {}
    for bits, count in value.items():
        if not BITSTRING.fullmatch(bits):
            raise mismatch(profile, "result", f"{bits!r} is not a bit string")
        if isinstance(count, bool) or not isinstance(count, int) or count < 0:
            raise mismatch(profile, "result", f"count {count!r} of {bits!r} is not a count")
        counts[bits] = count
    return counts


def probabilities_of(value: Any, profile: DeviceProfile) -> dict[str, float]:
    if not isinstance(value, dict):
        raise mismatch(profile, "result", f"probabilities are {type(value).__name__}")
    probabilities: dict[str, float] = {}
    for bits, p in value.items():
        if not BITSTRING.fullmatch(bits):
            raise mismatch(profile, "result", f"{bits!r} is not a bit string")
        if isinstance(p, bool) or not isinstance(p, int | float) or not math.isfinite(p):
            raise mismatch(profile, "result", f"probability {p!r} of {bits!r} is not a number")
        if not -1e-9 <= p <= 1 + 1e-9:
            raise mismatch(profile, "result", f"probability {p!r} of {bits!r} is out of [0, 1]")
        probabilities[bits] = float(p)
    return probabilities


def outcome_from(
    document: Any, profile: DeviceProfile
) -> tuple[dict[str, int] | None, dict[str, float] | None, Any]:
    """(counts, probabilities, device metadata) from a result answer. At least one of
    counts and probabilities must be there (not absent, not null)."""
    results = profile.results
    assert results.counts is not None  # format 1 profiles have counts
    raw_counts = pick(document, results.counts, "result", profile, default=None)
    raw_probabilities = None
    if results.probabilities is not None:
        raw_probabilities = pick(document, results.probabilities, "result", profile, default=None)
    if raw_counts is None and raw_probabilities is None:
        where = results.counts + (f" or {results.probabilities}" if results.probabilities else "")
        raise mismatch(profile, "result", f"no counts at {where}")
    counts = _counts(raw_counts, profile) if raw_counts is not None else None
    probabilities = (
        probabilities_of(raw_probabilities, profile) if raw_probabilities is not None else None
    )
    metadata = None
    if results.metadata is not None:
        metadata = pick(document, results.metadata, "result", profile, default=None)
    return counts, probabilities, metadata
