"""The loopback device's ``exchange`` preset: the same device behind another API shape,
one that rehearses what the profile language's format 2 describes.

- OAuth 2.0 client credentials (RFC 6749 §4.4): ``POST /oauth/token``, form-encoded,
  the client authenticated by HTTP Basic or form fields (§2.3.1); short-lived bearer
  tokens; an unknown or expired token gets 401 with ``WWW-Authenticate: Bearer
  error="invalid_token"`` (RFC 6750 §3);
- ``POST /v2/runs``: a form-encoded body (``source``, ``repetitions``, ``rng``), answered
  201 with the run's ``Location``; a repeated Idempotency-Key is answered 303 (see other)
  with the existing run's Location;
- ``GET /v2/runs/{id}``: a numeric status code and a note;
- ``GET /v2/runs/{id}/samples``: per-shot samples as hexadecimal strings (bit k of the
  integer is c[k]), a page at a time, the next page in an RFC 8288 ``Link`` header;
- ``POST /v2/runs/{id}/cancel``, ``GET /v2/calibration``.

The API shape is our own invention for rehearsal (``jobkeeper/profiles/loopback-exchange.toml``
speaks it).
"""

from __future__ import annotations

import base64
import hmac
import secrets
import threading
import time
from collections.abc import Callable
from typing import Any
from urllib.parse import parse_qsl, unquote_plus

from starlette.requests import Request
from starlette.responses import JSONResponse, Response
from starlette.routing import Route

from jobkeeper.backends.rest.wire import parse_structured_string
from jobkeeper.loopback._device import LoopbackDevice
from jobkeeper.loopback._outcomes import shot_record, value_of

CLIENT_ID = "loopback-client"
#: numeric status codes of the exchange preset (an invented scheme).
STATUS_CODES = {"queued": 10, "running": 11, "complete": 20, "error": 30, "cancelled": 40}


class TokenIssuer:
    """Issues short-lived access tokens to the one client that knows the secret."""

    def __init__(self, *, secret: str, ttl: float, clock: Callable[[], float] = time.time) -> None:
        self._secret = secret
        self.ttl = ttl
        self._clock = clock
        self._tokens: dict[str, float] = {}
        self._lock = threading.Lock()
        self.issued: list[str] = []
        self._used: set[str] = set()

    def client_ok(self, client_id: str, secret: str) -> bool:
        return client_id == CLIENT_ID and hmac.compare_digest(secret, self._secret)

    def issue(self) -> str:
        token = "lbx-" + secrets.token_urlsafe(24)
        with self._lock:
            self._tokens[token] = self._clock() + self.ttl
            self.issued.append(token)
        return token

    def valid(self, token: str) -> bool:
        with self._lock:
            expiry = self._tokens.get(token)
        return expiry is not None and self._clock() < expiry

    def first_use(self, headers: list[tuple[bytes, bytes]]) -> bool:
        """Whether the request's bearer token is used for the first time now (it is
        marked used). A token is never revoked on its first use: a client that just
        fetched one must be able to use it once."""
        token = dict(headers).get(b"authorization", b"").decode("latin-1").partition(" ")[2]
        with self._lock:
            first = token not in self._used
            self._used.add(token)
        return first

    def expire_all(self) -> None:
        """Every token issued so far expires now (a fault: tokens revoked early)."""
        with self._lock:
            self._tokens.clear()


def bearer_valid(issuer: TokenIssuer, headers: list[tuple[bytes, bytes]]) -> bool:
    for name, value in headers:
        if name == b"authorization":
            scheme, _, token = bytes(value).decode("latin-1").partition(" ")
            return scheme.lower() == "bearer" and issuer.valid(token.strip())
    return False


def token_refused() -> Response:
    return JSONResponse(
        {"error": "invalid_token", "error_description": "the access token is unknown or expired"},
        status_code=401,
        headers={"WWW-Authenticate": 'Bearer error="invalid_token"'},
    )


def idempotency_key(request: Request) -> str | None:
    """The request's Idempotency-Key, an RFC 8941 String as the IETF draft sends it."""
    raw_key = request.headers.get("idempotency-key")
    return parse_structured_string(raw_key) if raw_key is not None else None


def _client_of(request: Request, form: dict[str, str]) -> tuple[str, str]:
    header = request.headers.get("authorization", "")
    if header.lower().startswith("basic "):
        try:
            pair = base64.b64decode(header[6:].strip(), validate=True).decode()
        except (ValueError, UnicodeDecodeError):
            return "", ""
        client_id, _, secret = pair.partition(":")
        return unquote_plus(client_id), unquote_plus(secret)
    return form.get("client_id", ""), form.get("client_secret", "")


async def _form(request: Request) -> dict[str, str]:
    # application/x-www-form-urlencoded (the WHATWG URL standard's parser, as the
    # standard library implements it); the body is already bounded by the app
    body = (await request.body()).decode("utf-8", errors="replace")
    return dict(parse_qsl(body, keep_blank_values=True))


def token_route(issuer: TokenIssuer, path: str) -> Route:
    """The token endpoint (RFC 6749 §4.4.2, answers as §5.1 and §5.2), at ``path``."""

    async def token(request: Request) -> Response:
        form = await _form(request)
        if form.get("grant_type") != "client_credentials":
            return JSONResponse({"error": "unsupported_grant_type"}, status_code=400)
        if not issuer.client_ok(*_client_of(request, form)):
            return JSONResponse(
                {"error": "invalid_client"},
                status_code=401,
                headers={"WWW-Authenticate": 'Basic realm="loopback"'},
            )
        return JSONResponse(
            {"access_token": issuer.issue(), "token_type": "Bearer", "expires_in": issuer.ttl},
            headers={"Cache-Control": "no-store"},
        )

    return Route(path, token, methods=["POST"])


def exchange_routes(device: LoopbackDevice, issuer: TokenIssuer, page_size: int) -> list[Route]:
    async def submit(request: Request) -> Response:
        key = idempotency_key(request)
        form = await _form(request)
        body: dict[str, Any] = {"program": form.get("source"), "exact": False, "seed": None}
        try:
            body["shots"] = int(form.get("repetitions", ""))
            if form.get("rng"):
                body["seed"] = int(form["rng"])
        except ValueError:
            return JSONResponse({"error": "repetitions and rng are integers"}, status_code=400)
        created, job = device.submit(key, body)
        where = {"Location": f"/v2/runs/{job.id}"}
        if not created:
            return Response(status_code=303, headers=where)
        return JSONResponse({"accepted": True}, status_code=201, headers=where)

    async def status(request: Request) -> Response:
        job = device.job(request.path_params["run"])
        left = device.seconds_left(job)
        headers = {"Retry-After": str(int(left))} if left >= 1 else {}
        run = {"code": STATUS_CODES[job.state], "note": job.message}
        return JSONResponse({"run": run}, headers=headers)

    async def samples(request: Request) -> Response:
        run = request.path_params["run"]
        # bit k of the integer is c[k]
        shots = await shot_record(device, run, lambda bits: hex(value_of(bits)))
        start = int(request.query_params.get("from", "0") or 0)
        page = shots[start : start + page_size]
        headers = {}
        if start + page_size < len(shots):
            headers["Link"] = f'</v2/runs/{run}/samples?from={start + page_size}>; rel="next"'
        return JSONResponse({"samples": page, "from": start}, headers=headers)

    async def cancel(request: Request) -> Response:
        job = device.cancel(request.path_params["run"])
        return JSONResponse({"run": {"code": STATUS_CODES[job.state], "note": job.message}})

    async def calibration(request: Request) -> Response:
        return JSONResponse({"calibration": device.calibration})

    return [
        token_route(issuer, "/oauth/token"),
        Route("/v2/runs", submit, methods=["POST"]),
        Route("/v2/runs/{run}", status, methods=["GET"]),
        Route("/v2/runs/{run}/samples", samples, methods=["GET"]),
        Route("/v2/runs/{run}/cancel", cancel, methods=["POST"]),
        Route("/v2/calibration", calibration, methods=["GET"]),
    ]
