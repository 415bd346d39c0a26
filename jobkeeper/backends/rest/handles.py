"""Where a device's job id comes from, and what jobkeeper stores as the job's handle.

The id is read from the submission's answer as the profile says: at a JSON Pointer, or
from the ``Location`` header of a 201, 202 or 303 answer (RFC 9110 §10.2.2, §15.3.2,
§15.4.4), resolved against the request's URL and kept as its last path segment or its
whole path; a device that answers a repeated submission with 409 names the existing job
in its answer or its ``Location``, and one that answers it with 200 and the existing job
names it in its answer or its ``Content-Location`` (RFC 9110 §8.7). A Location on another origin is refused: the device's
credentials would travel there with every poll.

For format 2 profiles the stored handle also notes the shots asked for and the widths of
the circuit's classical registers, which reading the result needs (a total checked
against the shots, outcomes split by register), since a poll is given only the handle:
``shots=100;registers=2,1;job=<device id>``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any
from urllib.parse import unquote

import httpx

from jobkeeper.backends.rest.http import MAX_HANDLE, Reply
from jobkeeper.backends.rest.profile import DeviceProfile, SubmitSpec
from jobkeeper.backends.rest.redaction import Redactor
from jobkeeper.backends.rest.results import pick
from jobkeeper.exceptions import PermanentBackendError, TransientBackendError

_NOTE = re.compile(r"shots=(\d+);registers=((?:\d+(?:,\d+)*)?);job=(.*)", re.DOTALL)


@dataclass(frozen=True)
class JobRef:
    """A device job as jobkeeper keeps it: the device's id, and (format 2) the shots asked
    for and the classical registers' widths."""

    device: str
    shots: int | None = None
    registers: tuple[int, ...] | None = None

    def stored(self) -> str:
        if self.shots is None or self.registers is None:
            return self.device
        widths = ",".join(str(w) for w in self.registers)
        return f"shots={self.shots};registers={widths};job={self.device}"

    @classmethod
    def read(cls, handle: str, *, noted: bool) -> JobRef:
        """The reference a stored handle stands for (``noted``: the profile notes shots
        and registers, so the handle must carry them)."""
        if not noted:
            return cls(handle)
        match = _NOTE.fullmatch(handle)
        if match is None:
            raise PermanentBackendError(
                f"handle {handle[:80]!r} lacks the shots and registers this profile's "
                "results need (was it stored under another profile?)"
            )
        widths = tuple(int(w) for w in match[2].split(",")) if match[2] else ()
        return cls(match[3], int(match[1]), widths)


def _same_origin(url: httpx.URL, base: httpx.URL) -> bool:
    return (url.scheme, url.host, url.port) == (base.scheme, base.host, base.port)


def from_location(reply: Reply, spec: SubmitSpec, base: str, header: str = "Location") -> str:
    """The job id in the answer's ``Location`` header (or ``header``), resolved against
    the request URL."""
    value = reply.headers.get(header.lower())
    if not value:
        raise PermanentBackendError(
            f"the device's {reply.status} answer to the submission has no {header} header"
        )
    try:
        url = httpx.URL(reply.url).join(value.strip())
    except httpx.InvalidURL:
        raise PermanentBackendError(f"the device's {header} header is not a URL") from None
    if not _same_origin(url, httpx.URL(base)):
        raise PermanentBackendError(
            f"the device's {header} points to another origin ({url.scheme}://{url.host}); "
            "the job is not followed there"
        )
    path = url.raw_path.decode("ascii").split("?", 1)[0]
    if spec.handle_part == "path":
        return path
    segments = [segment for segment in path.split("/") if segment]
    if not segments:
        raise PermanentBackendError(f"the device's {header} {path!r} names no job")
    return unquote(segments[-1])


def _from_answer(document: Any, pointer: str, profile: DeviceProfile, base: str) -> str:
    raw = pick(document, pointer, "submit", profile)
    if isinstance(raw, bool) or not isinstance(raw, str | int) or str(raw) == "":
        raise PermanentBackendError(
            f"the device's job id at {pointer!r} is {raw!r}, not a non-empty string or integer"
        )
    return str(raw)


def device_handle(reply: Reply, profile: DeviceProfile, base: str, redactor: Redactor) -> str:
    """The device's job id from the submission's answer, as the profile says; checked
    for length and for secrets."""
    spec = profile.requests.submit
    if reply.status == 409:  # a repeat, answered as a conflict naming the existing job
        if spec.conflict_handle is not None:
            handle = _from_answer(reply.document, spec.conflict_handle, profile, base)
        else:
            handle = from_location(reply, spec, base)
    elif reply.status == 200 and spec.repeats == "existing" and spec.handle_from == "location":
        # the existing job, which a 200 answer to a POST names by Content-Location
        handle = from_location(reply, spec, base, "Content-Location")
    elif reply.status == 303 or spec.handle_from == "location":
        if reply.status not in (201, 202, 303):
            raise TransientBackendError(
                f"the device answered the submission with {reply.status}, not 201, 202 or "
                "303 with a Location; the submission may have been accepted"
            )
        handle = from_location(reply, spec, base)
    else:
        assert spec.handle is not None  # the profile checks it
        handle = _from_answer(reply.document, spec.handle, profile, base)
    size = len(handle.encode("utf-8"))
    if size > MAX_HANDLE:
        raise PermanentBackendError(
            f"the device's job id is {size} bytes long; at most {MAX_HANDLE} are accepted"
        )
    if redactor.holds_secret(handle):
        raise PermanentBackendError("the device's job id holds a secret; it is not kept")
    return handle
