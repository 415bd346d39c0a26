"""One REST backend's conversation with its device: the HTTP client, credentials on
every request, answers read with a size cap, in-call retries, and redaction of every
secret from whatever the device says.

The client is created on first use (per event loop) and closed by :meth:`aclose`.
"""

from __future__ import annotations

import ssl
from collections.abc import Awaitable, Callable, Mapping
from dataclasses import dataclass
from typing import Any

import httpx

from jobkeeper.backends.rest.http import (
    DEFAULT_IN_CALL_RETRY,
    DEFAULT_MAX_ANSWER,
    DEFAULT_TIMEOUTS,
    DeviceAuthError,
    InCallRetry,
    Reply,
    Timeouts,
    Wire,
    read_bounded,
    read_reply,
    request_headers,
    retrying,
    transport_error,
)
from jobkeeper.backends.rest.redaction import Redactor
from jobkeeper.exceptions import TransientBackendError


@dataclass(frozen=True)
class Outgoing:
    """One request as the adapter means it: ``target`` is a path (relative to the
    backend's URL) or an absolute URL; ``body`` goes as JSON, or form-encoded when
    ``form``."""

    method: str
    target: str
    body: Any = None
    form: bool = False
    headers: Mapping[str, str] | None = None


#: gives the headers that authenticate a request (they may involve a request of their own).
AuthHeaders = Callable[[], Awaitable[Mapping[str, str]]]


class DeviceSession:
    """Sends :class:`Outgoing` requests to one device and reads its answers."""

    def __init__(
        self,
        *,
        url: str,
        wire: Wire,
        user_agent: str,
        redactor: Redactor,
        timeouts: Timeouts = DEFAULT_TIMEOUTS,
        max_connections: int = 10,
        retry: InCallRetry = DEFAULT_IN_CALL_RETRY,
        max_answer: int = DEFAULT_MAX_ANSWER,
        ca_file: str | None = None,
        trust_env: bool = False,
        transport: httpx.AsyncBaseTransport | None = None,
    ) -> None:
        self.url = url.rstrip("/")
        self.wire = wire
        self.redactor = redactor
        self.max_answer = max_answer
        self._user_agent = user_agent
        self._timeouts = timeouts
        self._max_connections = max_connections
        self._retry = retry
        self._ca_file = ca_file
        self._trust_env = trust_env
        self._transport = transport
        self._client: httpx.AsyncClient | None = None

    def client(self) -> httpx.AsyncClient:
        if self._client is None:
            verify: ssl.SSLContext | bool = True
            if self._ca_file is not None:
                verify = ssl.create_default_context(cafile=self._ca_file)
            limits = httpx.Limits(
                max_connections=self._max_connections,
                max_keepalive_connections=self._max_connections,
                keepalive_expiry=30.0,
            )
            self._client = httpx.AsyncClient(
                base_url=self.url,
                timeout=self._timeouts.to_httpx(),
                limits=limits,
                verify=verify,
                trust_env=self._trust_env,
                follow_redirects=False,
                transport=self._transport,
            )
        return self._client

    async def exchange(self, op: str, request: Outgoing, headers: Mapping[str, str]) -> Reply:
        """Send ``request`` once with ``headers`` and read the answer, capped at
        ``max_answer`` bytes."""
        content: dict[str, Any] = {}
        if request.body is not None:
            content = {"data": request.body} if request.form else {"json": request.body}
        all_headers = request_headers({**headers, **(request.headers or {})}, self._user_agent)
        try:
            async with self.client().stream(
                request.method, request.target, headers=all_headers, **content
            ) as streamed:
                response = await read_bounded(op, streamed, self.wire, self.max_answer)
        except httpx.HTTPError as exc:
            raise transport_error(op, exc, self.wire, self.redactor) from exc
        return read_reply(op, response, self.wire, self.redactor)

    async def send(
        self,
        op: str,
        request: Outgoing,
        auth: AuthHeaders,
        *,
        on_refused: Callable[[Mapping[str, str]], Awaitable[bool]] | None = None,
    ) -> Reply:
        """Send ``request`` with in-call retries of transient errors. ``auth`` gives the
        credentials' headers for each try; when the device refuses them (401) and
        ``on_refused`` (given the refused headers) says fresh credentials are worth a
        try, the request goes once more with them; if they are refused too, the error is
        transient (the token request succeeded, so the credentials themselves are good)."""
        async for attempt in retrying(self._retry):
            with attempt:
                headers = await auth()
                try:
                    return await self.exchange(op, request, headers)
                except DeviceAuthError as exc:
                    if exc.status != 401 or on_refused is None or not await on_refused(headers):
                        raise
                try:
                    return await self.exchange(op, request, await auth())
                except DeviceAuthError as exc:
                    if exc.status != 401:
                        raise
                    # A token fetched a moment ago was refused too (the token request
                    # itself succeeded, so the credentials are good): the device revokes
                    # tokens early. Later, with another token, it may take the request.
                    raise TransientBackendError(
                        f"{self.wire.backend}: the device refused a freshly obtained access "
                        f"token on the {op} request too; the request is retried later"
                    ) from None
        raise AssertionError("unreachable: tenacity re-raises the last error")

    async def aclose(self) -> None:
        if self._client is not None:
            await self._client.aclose()
            self._client = None
