"""HTTP plumbing of the REST device adapter: timeouts, in-call retries, and the one place
where httpx's exceptions and the device's status codes become jobkeeper's errors.

Error classes (notes/queue-reliability.md §3):

- transient: connection errors, timeouts, 408, 409 (an outstanding request with the same
  idempotency key), 425, 429 and 5xx (with ``Retry-After`` honoured), a 2xx answer that
  is not JSON;
- permanent: the other 4xx, keeping the device's message; 401/403 say which environment
  variable's token was refused, never the token; TLS certificate failures.

A submission whose answer was lost (timeout or a dropped connection after sending) is
ambiguous: the message says so, and the retry carries the same idempotency key.
"""

from __future__ import annotations

import json
import logging
import ssl
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

import httpx
from tenacity import (
    AsyncRetrying,
    RetryCallState,
    retry_if_exception,
    stop_after_attempt,
    wait_random_exponential,
)

from jobkeeper.backend import report_try
from jobkeeper.backends.rest.redaction import Redactor
from jobkeeper.backends.rest.wire import PointerError, parse_retry_after, resolve_pointer
from jobkeeper.exceptions import PermanentBackendError, TransientBackendError

log = logging.getLogger("jobkeeper.backends.rest.adapter")

#: the longest Retry-After we pass on (one hour); a larger hint is clamped and logged.
MAX_RETRY_AFTER = 3600.0
#: device messages are cut to this many characters in our errors.
MAX_MESSAGE = 500
#: the largest answer read from a device, by default (bytes, after decompression).
DEFAULT_MAX_ANSWER = 4 * 1024 * 1024
#: the longest job handle accepted from a device (bytes of UTF-8).
MAX_HANDLE = 1024
#: headers that describe the bytes on the wire, not the body as read.
_WIRE_HEADERS = frozenset({"content-encoding", "content-length", "transfer-encoding"})


class DeviceAuthError(PermanentBackendError):
    """The device refused the token (401/403), or the token's environment variable is not
    set. It concerns every job on the backend, not just one. ``status`` is the device's
    HTTP status, None when no request was sent."""

    def __init__(self, message: str, *, status: int | None = None) -> None:
        super().__init__(message)
        self.status = status


class DeviceForgotJob(PermanentBackendError):
    """The device answers 404 or 410 for a job it accepted: it lost the job (a restart
    that kept no state, an expiry). The job fails; it is never submitted again on its
    own, since the device may have run it before it forgot."""


@dataclass(frozen=True)
class Timeouts:
    """Seconds allowed to connect, to read an answer, to write a request, and to wait for
    a free connection from the pool."""

    connect: float = 5.0
    read: float = 30.0
    write: float = 30.0
    pool: float = 10.0

    @classmethod
    def total(cls, seconds: float) -> Timeouts:
        """One number for all four; connecting gets at most 10 s of it."""
        return cls(connect=min(seconds, 10.0), read=seconds, write=seconds, pool=seconds)

    def to_httpx(self) -> httpx.Timeout:
        return httpx.Timeout(connect=self.connect, read=self.read, write=self.write, pool=self.pool)


@dataclass(frozen=True)
class InCallRetry:
    """Quick retries inside one adapter call: few attempts, short waits. The queue does
    the long retries; a Retry-After longer than ``max_wait`` goes straight back to it."""

    attempts: int = 3
    first_wait: float = 0.2
    max_wait: float = 2.0


DEFAULT_TIMEOUTS = Timeouts()
DEFAULT_IN_CALL_RETRY = InCallRetry()

#: what each operation is called in messages, as the object a device can reject.
NOUNS = {
    "submit": "job",
    "status": "status request",
    "result": "result request",
    "cancel": "cancel request",
    "calibration": "calibration request",
}


@dataclass(frozen=True)
class Reply:
    """A device's successful answer: status code, parsed JSON (None when empty), the
    retry hint in seconds, if it gave one, its headers and the URL it answered."""

    status: int
    document: Any
    retry_after: float | None
    headers: httpx.Headers = field(default_factory=httpx.Headers)
    url: str = ""


@dataclass(frozen=True)
class Wire:
    """What error mapping needs to know about the backend and its profile."""

    backend: str
    #: what the credentials are, for messages: "the token in environment variable X"
    credentials: str
    retry_header: str
    message_pointer: str | None
    #: the device answers a repeated submission with 409 naming the existing job
    conflict_names_job: bool = False


def _clamp(seconds: float | None, wire: Wire) -> float | None:
    if seconds is not None and seconds > MAX_RETRY_AFTER:
        log.warning(
            "backend %s: Retry-After of %.0f s clamped to %.0f s",
            wire.backend,
            seconds,
            MAX_RETRY_AFTER,
        )
        return MAX_RETRY_AFTER
    return seconds


def device_message(response: httpx.Response, wire: Wire, redactor: Redactor) -> str:
    """The device's human-readable message from an error answer, redacted and cut short."""
    text = ""
    if wire.message_pointer is not None:
        try:
            value = resolve_pointer(response.json(), wire.message_pointer)
            text = value if isinstance(value, str) else json.dumps(value)
        except (ValueError, PointerError):
            text = ""
    if not text:
        text = response.text.strip() or response.reason_phrase or "no message"
    text = redactor.text(" ".join(text.split()))
    return text if len(text) <= MAX_MESSAGE else text[: MAX_MESSAGE - 1] + "…"


def read_reply(op: str, response: httpx.Response, wire: Wire, redactor: Redactor) -> Reply:
    """A successful :class:`Reply`, or the error the answer stands for."""
    status = response.status_code
    retry_after = _clamp(parse_retry_after(response.headers.get(wire.retry_header)), wire)
    headers, url = response.headers, str(response.request.url)
    if 200 <= status < 300:
        if not response.content.strip():
            return Reply(status, None, retry_after, headers, url)
        try:
            return Reply(status, response.json(), retry_after, headers, url)
        except (ValueError, UnicodeDecodeError, RecursionError):
            raise TransientBackendError(
                f"{wire.backend}: the device's answer to the {op} request is not valid JSON"
                + (" (the submission may have been accepted)" if op == "submit" else ""),
                retry_after=retry_after,
            ) from None
    if op == "submit" and status == 303:  # see other: the job made by an earlier request
        return Reply(status, None, retry_after, headers, url)
    if op == "submit" and status == 409 and wire.conflict_names_job:
        try:
            document = response.json() if response.content.strip() else None
        except (ValueError, UnicodeDecodeError, RecursionError):
            document = None
        return Reply(status, document, retry_after, headers, url)
    message = device_message(response, wire, redactor)
    if op == "cancel" and status == 409:
        # the job already finished (or was cancelled): the next poll tells which.
        return Reply(status, None, retry_after, headers, url)
    if status in (401, 403):
        raise DeviceAuthError(
            f"{wire.backend}: the device refused the {'credentials' if op == 'token' else 'token'}"
            f" ({status}): {wire.credentials} (device said: {message})",
            status=status,
        )
    if status in (408, 409, 425, 429) or status >= 500:
        hint = f"; retry after {retry_after:g} s" if retry_after is not None else ""
        raise TransientBackendError(
            f"{wire.backend}: device error on the {op} request ({status}): {message}{hint}",
            retry_after=retry_after,
        )
    if status in (404, 410) and op in ("status", "result"):
        raise DeviceForgotJob(
            f"{wire.backend}: the device no longer knows this job ({status} on the {op} "
            f"request: {message}); it was not sent again, since the device may have run it "
            "(`jobkeeper rerun JOB` submits the circuit anew)"
        )
    if 400 <= status < 500:
        raise PermanentBackendError(
            f"device rejected the {NOUNS.get(op, op)} ({status}): {message}"
        )
    raise PermanentBackendError(
        f"{wire.backend}: unexpected answer to the {op} request ({status}): {message}"
    )


def _is_certificate_failure(exc: BaseException) -> bool:
    seen: BaseException | None = exc
    for _ in range(8):  # bounded walk down the cause chain
        if seen is None:
            return False
        if isinstance(seen, ssl.SSLCertVerificationError):
            return True
        seen = seen.__cause__ or seen.__context__
    return False


def transport_error(op: str, exc: httpx.HTTPError, wire: Wire, redactor: Redactor) -> Exception:
    """The jobkeeper error for an httpx exception raised while sending ``op``."""
    detail = redactor.text(str(exc) or type(exc).__name__)
    if _is_certificate_failure(exc):
        return PermanentBackendError(
            f"{wire.backend}: TLS certificate verification failed on the {op} request: {detail}"
        )
    if isinstance(exc, httpx.UnsupportedProtocol | httpx.InvalidURL):
        return PermanentBackendError(f"{wire.backend}: cannot send the {op} request: {detail}")
    if isinstance(exc, httpx.TimeoutException):
        what = f"no answer to the {op} request in time ({type(exc).__name__})"
    else:
        what = f"the {op} request failed: {type(exc).__name__}: {detail}"
    if op == "submit":
        what += "; the submission may have been accepted, so it is retried with the same key"
    return TransientBackendError(f"{wire.backend}: {what}")


class AnswerTooLarge(PermanentBackendError):
    """A device's answer was larger than the backend's ``max_answer``: it was cut off
    unread (a hostile or broken device must not fill memory or the archive)."""


async def read_bounded(op: str, response: httpx.Response, wire: Wire, limit: int) -> httpx.Response:
    """``response`` (opened with ``stream=True``) read in chunks up to ``limit`` bytes, as
    an ordinary response; an announced or actual body beyond ``limit`` is refused with
    :class:`AnswerTooLarge` before more of it is read."""
    too_large = AnswerTooLarge(
        f"{wire.backend}: the device's answer to the {op} request is larger than "
        f"{limit} bytes (the backend's max_answer); it was not read"
    )
    announced = response.headers.get("content-length", "")
    if announced.isdigit() and int(announced) > limit:
        raise too_large
    chunks: list[bytes] = []
    size = 0
    async for chunk in response.aiter_bytes():
        size += len(chunk)
        if size > limit:
            raise too_large
        chunks.append(chunk)
    headers = [(k, v) for k, v in response.headers.multi_items() if k.lower() not in _WIRE_HEADERS]
    return httpx.Response(
        response.status_code,
        headers=headers,
        content=b"".join(chunks),
        request=response.request,
        extensions=response.extensions,
    )


def _quick_retry(policy: InCallRetry) -> Callable[[BaseException], bool]:
    def check(exc: BaseException) -> bool:
        if not isinstance(exc, TransientBackendError):
            return False
        return exc.retry_after is None or exc.retry_after <= policy.max_wait

    return check


def _wait(policy: InCallRetry) -> Callable[[RetryCallState], float]:
    backoff = wait_random_exponential(multiplier=policy.first_wait, max=policy.max_wait)

    def wait(state: RetryCallState) -> float:
        exc = state.outcome.exception() if state.outcome is not None else None
        if isinstance(exc, TransientBackendError) and exc.retry_after is not None:
            return exc.retry_after
        return backoff(state)

    return wait


def _report(state: RetryCallState) -> None:
    # Each try tenacity is about to retry becomes an attempt of the job; the last one, if
    # it fails too, is re-raised and recorded by the worker as the call's own attempt.
    error = state.outcome.exception() if state.outcome is not None else None
    if error is not None:
        report_try(error)


def retrying(policy: InCallRetry) -> AsyncRetrying:
    """tenacity's loop for ``policy``: it retries only our TransientBackendError (whose
    Retry-After is short enough), reports each try it retries (see
    :func:`jobkeeper.backend.report_try`), and re-raises the last one when it gives up."""
    return AsyncRetrying(
        stop=stop_after_attempt(max(1, policy.attempts)),
        wait=_wait(policy),
        retry=retry_if_exception(_quick_retry(policy)),
        before_sleep=_report,
        reraise=True,
    )


def request_headers(extra: Mapping[str, str], user_agent: str) -> dict[str, str]:
    return {"Accept": "application/json", "User-Agent": user_agent, **extra}
