"""The loopback device's faults: which there are, the plan of how often to inject them,
and the answers that break off, stall or never end.

Drawn at random (``ALL_FAULTS``): ``500``; ``503`` with an HTTP-date Retry-After; ``429``
with a delta-seconds Retry-After; ``slow`` (the answer comes after ``slow_delay`` seconds,
past the client's timeout; the request is still carried out); ``drop`` (headers, then the
connection closes mid-body, nothing done); ``malformed`` (200 with broken JSON, nothing
done); ``lost`` (the request is carried out, e.g. the job IS created, then the answer is
cut off like ``drop``). Only when asked for by name (``force``, ``--faults``): ``huge``
(200 with a JSON answer of ``huge_size`` bytes, 200 MiB by default, streamed without a
length; a hostile device's endless job id; nothing done) and ``expire`` (every access
token issued so far expires, and the request is refused with 401; the presets with
OAuth, ``exchange`` and ``relay``, only).
"""

from __future__ import annotations

import base64
from collections.abc import Callable
from dataclasses import dataclass
from urllib.parse import quote

from starlette.types import Message, Receive, Send

ALL_FAULTS = ("500", "503", "429", "slow", "drop", "malformed", "lost")
#: every fault kind: ALL_FAULTS and those injected only when named.
KNOWN_FAULTS = (*ALL_FAULTS, "huge", "expire")
#: how a careless device may echo the credentials it was sent (see ``echo_on_rejection``).
ECHO_FORMS: dict[str, Callable[[str], str]] = {
    "lower": str.lower,
    "upper": str.upper,
    "base64": lambda text: base64.b64encode(text.encode()).decode(),
    "url": lambda text: quote(text, safe=""),
    "hex": lambda text: text.encode().hex(),
}
#: the chunk in which a ``huge`` answer is streamed.
_HUGE_CHUNK = 1024 * 1024

#: a request body larger than this is refused (413) before it is read.
MAX_BODY = 4 * 1024 * 1024


@dataclass(frozen=True)
class FaultPlan:
    """Which faults to inject, how often, and their timings."""

    rate: float = 0.0
    kinds: tuple[str, ...] = ALL_FAULTS
    seed: int = 0
    slow_delay: float = 35.0
    retry_after: int = 1
    huge_size: int = 200 * 1024 * 1024

    def __post_init__(self) -> None:
        unknown = set(self.kinds) - set(KNOWN_FAULTS)
        if unknown:
            raise ValueError(f"unknown fault kinds {sorted(unknown)}; known: {KNOWN_FAULTS}")
        if not 0.0 <= self.rate <= 1.0:
            raise ValueError(f"fault rate must be in [0, 1], not {self.rate}")
        if self.rate > 0 and not self.kinds:
            raise ValueError("a fault rate above 0 needs at least one fault kind")


async def discard(message: Message) -> None:
    return None


async def buffered(receive: Receive) -> Receive:
    """Read the whole request body now; the returned ``receive`` hands it over later
    (then waits on the real one, e.g. for the client's disconnect)."""
    chunks: list[bytes] = []
    size = 0
    while size <= MAX_BODY:  # bounded: the content-length was checked against MAX_BODY
        message = await receive()
        if message["type"] != "http.request":
            break
        chunk = bytes(message.get("body", b""))
        chunks.append(chunk)
        size += len(chunk)
        if not message.get("more_body", False):
            break
    body = b"".join(chunks)
    handed_over = False

    async def replay() -> Message:
        nonlocal handed_over
        if handed_over:
            return await receive()
        handed_over = True
        return {"type": "http.request", "body": body, "more_body": False}

    return replay


async def cut_off(send: Send) -> None:
    # Headers promise 64 bytes, a few arrive, then the ASGI call returns: uvicorn closes
    # the connection and the client sees a protocol error, as with a dropped connection.
    await send(
        {
            "type": "http.response.start",
            "status": 200,
            "headers": [(b"content-type", b"application/json"), (b"content-length", b"64")],
        }
    )
    await send({"type": "http.response.body", "body": b'{"job": ', "more_body": True})


async def huge(send: Send, size: int) -> None:
    # A job id that never ends: streamed (no Content-Length) so that only a client that
    # counts what it reads can stop it. A client that hangs up ends the stream early.
    await send(
        {
            "type": "http.response.start",
            "status": 200,
            "headers": [(b"content-type", b"application/json")],
        }
    )
    head = b'{"job": {"id": "'
    await send({"type": "http.response.body", "body": head, "more_body": True})
    chunk = b"x" * _HUGE_CHUNK
    sent = len(head)
    while sent < size:  # bounded by size
        piece = chunk[: min(_HUGE_CHUNK, size - sent)]
        try:
            await send({"type": "http.response.body", "body": piece, "more_body": True})
        except OSError:  # the client hung up
            return
        sent += len(piece)
    await send({"type": "http.response.body", "body": b'"}}', "more_body": False})
