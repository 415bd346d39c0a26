"""The loopback device's HTTP face: a starlette app behind a small ASGI layer that checks
the bearer token and injects faults.

Endpoints (the loopback profile, ``jobkeeper/profiles/loopback.toml``, speaks them)::

    POST /v1/jobs                 submit; needs an Idempotency-Key header
    GET  /v1/jobs/{id}            status (Retry-After while the job waits ≥ 1 s)
    GET  /v1/jobs/{id}/result     counts (or probabilities) once complete
    POST /v1/jobs/{id}/cancel     cancel a waiting job
    GET  /v1/calibration          invented calibration numbers
    GET  /stats                   counters (no token, no faults)
    GET  /health                  liveness (no token, no faults)

The ``exchange``, ``ledger`` and ``relay`` presets speak other API shapes instead
(``_exchange.py``, ``_ledger.py``, ``_relay.py``). Faults (``_faults.py``) are drawn per
``/v1`` request (the preset's own paths in the others, its token endpoint included) with
probability ``rate`` from a seeded generator (which request gets which draw depends on
arrival order).
"""

from __future__ import annotations

import asyncio
import hmac
import json
import random
from collections import deque
from datetime import UTC, datetime, timedelta
from typing import Any, TypedDict

from starlette.applications import Starlette
from starlette.concurrency import run_in_threadpool
from starlette.requests import ClientDisconnect, Request
from starlette.responses import JSONResponse, Response
from starlette.routing import Route
from starlette.types import Receive, Scope, Send

from jobkeeper.backends.rest.wire import format_http_date, parse_structured_string
from jobkeeper.loopback._device import LoopbackDevice, Rejection
from jobkeeper.loopback._exchange import TokenIssuer, bearer_valid, exchange_routes, token_refused
from jobkeeper.loopback._faults import (
    ALL_FAULTS,
    ECHO_FORMS,
    KNOWN_FAULTS,
    MAX_BODY,
    FaultPlan,
    buffered,
    cut_off,
    discard,
    huge,
)
from jobkeeper.loopback._ledger import ledger_routes
from jobkeeper.loopback._relay import TOKEN_PATH, relay_routes
from jobkeeper.loopback._state import DeviceState

__all__ = ["ALL_FAULTS", "KNOWN_FAULTS", "PRESETS", "FaultPlan", "LoopbackApp", "create_app"]

#: the API shapes the device can speak: its own (``loopback``), ``exchange``, ``ledger`` and
#: ``relay``, each with a shipped profile (``loopback-exchange``, ...).
PRESETS = ("loopback", "exchange", "ledger", "relay")
#: the paths where faults are injected and the credentials checked, per preset.
_GUARDED = {"loopback": ("/v1/",), "exchange": ("/v2/", "/oauth/"), "ledger": ("/v3/",),
            "relay": ("/v4/",)}  # fmt: skip
#: the presets that issue access tokens (OAuth client credentials), and where.
_TOKEN_PATHS = {"exchange": "/oauth/token", "relay": TOKEN_PATH}


def _error(status: int, code: str, message: str, headers: dict[str, str] | None = None) -> Response:
    return JSONResponse(
        {"error": {"code": code, "message": message}}, status_code=status, headers=headers
    )


def _routes(device: LoopbackDevice) -> Starlette:
    async def submit(request: Request) -> Response:
        raw_key = request.headers.get("idempotency-key")
        key = parse_structured_string(raw_key) if raw_key is not None else None
        try:
            body: Any = json.loads(await request.body())
        except (ValueError, UnicodeDecodeError):
            return _error(400, "bad-request", "the body is not JSON")
        except ClientDisconnect:  # gone before it finished sending: nothing was asked
            return Response(status_code=400)
        _created, job = device.submit(key, body)
        # a replay answers exactly as the first request was answered
        return JSONResponse(
            {"job": job.public()}, status_code=201, headers={"Location": f"/v1/jobs/{job.id}"}
        )

    async def status(request: Request) -> Response:
        job = device.job(request.path_params["job_id"])
        headers = {}
        left = device.seconds_left(job)
        if job.state in ("queued", "running") and left >= 1:
            headers["Retry-After"] = str(int(left))
        return JSONResponse({"job": job.public()}, headers=headers)

    async def result(request: Request) -> Response:
        job_id = request.path_params["job_id"]
        kind, values = await device.result(job_id, run_in_threadpool)
        job = device.job(job_id)
        outcome = {
            "counts": values if kind == "counts" else None,
            "probabilities": values if kind == "probabilities" else None,
            "metadata": {"seed": job.seed, "shots": job.shots, "simulator": "statevector"},
        }
        return JSONResponse({"job": job.public(), "result": outcome})

    async def cancel(request: Request) -> Response:
        return JSONResponse({"job": device.cancel(request.path_params["job_id"]).public()})

    async def calibration(request: Request) -> Response:
        return JSONResponse({"calibration": device.calibration})

    async def stats(request: Request) -> Response:
        return JSONResponse(device.stats())

    async def health(request: Request) -> Response:
        return JSONResponse({"ok": True})

    async def rejected(request: Request, exc: Exception) -> Response:
        assert isinstance(exc, Rejection)
        headers = {"Retry-After": "5"} if exc.status == 503 else None
        return _error(exc.status, exc.code, exc.message, headers)

    return Starlette(
        routes=[
            Route("/v1/jobs", submit, methods=["POST"]),
            Route("/v1/jobs/{job_id}", status, methods=["GET"]),
            Route("/v1/jobs/{job_id}/result", result, methods=["GET"]),
            Route("/v1/jobs/{job_id}/cancel", cancel, methods=["POST"]),
            Route("/v1/calibration", calibration, methods=["GET"]),
            Route("/stats", stats, methods=["GET"]),
            Route("/health", health, methods=["GET"]),
        ],
        exception_handlers={Rejection: rejected},
    )


class LoopbackApp:
    """The ASGI application: token check and faults around the routes."""

    def __init__(
        self,
        device: LoopbackDevice,
        *,
        token: str,
        faults: FaultPlan,
        preset: str = "loopback",
        token_ttl: float = 60.0,
        page_size: int = 100,
    ) -> None:
        if not token:
            raise ValueError("the loopback device needs a non-empty token")
        if preset not in PRESETS:
            raise ValueError(f"unknown preset {preset!r}; known: {', '.join(PRESETS)}")
        self.device = device
        self.preset = preset
        self._expected = f"Bearer {token}".encode()
        self._faults = faults
        self._rng = random.Random(faults.seed)
        #: the token issuer of the presets with OAuth (their client secret is ``token``)
        self.issuer = TokenIssuer(secret=token, ttl=token_ttl)
        self._routes = _routes(device)
        self._key = token.encode()
        if preset == "exchange":
            self._routes.router.routes[:0] = exchange_routes(device, self.issuer, page_size)
        elif preset == "ledger":
            self._routes.router.routes[:0] = ledger_routes(device, page_size)
        elif preset == "relay":
            self._routes.router.routes[:0] = relay_routes(device, self.issuer, page_size)
        self._token_path = _TOKEN_PATHS.get(preset)
        self._forced: deque[tuple[str, str | None, str | None]] = deque()
        self._echoes: deque[str] = deque()

    def echo_on_rejection(self, form: str, *, times: int = 1) -> None:
        """Refuse the next ``times`` ``/v1`` requests with a 400 whose message echoes the
        credentials the client sent, in ``form`` (one of ECHO_FORMS): how a careless
        device leaks a token into an error message."""
        if form not in ECHO_FORMS:
            raise ValueError(f"unknown echo form {form!r}; known: {sorted(ECHO_FORMS)}")
        self._echoes.extend([form] * times)

    def _echo(self, scope: Scope, form: str) -> Response:
        sent = dict(scope["headers"]).get(b"authorization", b"").decode("latin-1")
        echoed = ECHO_FORMS[form](sent)
        return _error(400, "bad-credentials", f"credentials {echoed} are not valid here")

    def force(
        self, kind: str, *, method: str | None = None, path: str | None = None, times: int = 1
    ) -> None:
        """Inject ``kind`` into the next ``times`` ``/v1`` requests that match ``method``
        and start with ``path`` (None matches any), before any random draw. Safe to call
        from another thread (deque appends and pops are atomic)."""
        if kind not in KNOWN_FAULTS:
            raise ValueError(f"unknown fault kind {kind!r}; known: {KNOWN_FAULTS}")
        for _ in range(times):
            self._forced.append((kind, method, path))

    def _take_forced(self, scope: Scope) -> str | None:
        for entry in list(self._forced):
            kind, method, path = entry
            if method is not None and method != scope["method"]:
                continue
            if path is not None and not str(scope["path"]).startswith(path):
                continue
            try:
                self._forced.remove(entry)
            except ValueError:  # taken by a concurrent request
                continue
            return kind
        return None

    def _authorised(self, scope: Scope) -> bool:
        if self._token_path is not None:
            return self._asks_token(scope) or bearer_valid(self.issuer, scope["headers"])
        if self.preset == "ledger":
            sent = dict(scope["headers"]).get(b"x-ledger-key", b"")
            return hmac.compare_digest(bytes(sent), self._key)
        for name, value in scope["headers"]:
            if name == b"authorization":
                return hmac.compare_digest(bytes(value), self._expected)
        return False

    def _asks_token(self, scope: Scope) -> bool:
        return self._token_path is not None and str(scope["path"]) == self._token_path

    def _draw(self) -> str | None:
        plan = self._faults
        if plan.rate <= 0 or self._rng.random() >= plan.rate:
            return None
        return self._rng.choice(plan.kinds)

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or not str(scope["path"]).startswith(_GUARDED[self.preset]):
            await self._routes(scope, receive, send)
            return
        self.device.counters["requests"] += 1
        response: Response | None = None
        length = dict(scope["headers"]).get(b"content-length", b"0")
        if not self._authorised(scope) and self._token_path is not None:
            response = token_refused()
        elif not self._authorised(scope):
            response = _error(
                401,
                "unauthorized",
                "missing or wrong bearer token",
                {"WWW-Authenticate": 'Bearer realm="loopback"'},
            )
        elif not length.isdigit() or int(length) > MAX_BODY:
            response = _error(413, "too-large", f"request bodies are limited to {MAX_BODY} bytes")
        elif self._echoes:
            try:
                response = self._echo(scope, self._echoes.popleft())
            except IndexError:  # taken by a concurrent request
                response = None
        if response is not None:
            await response(scope, receive, send)
            return
        kind = self._take_forced(scope) or self._draw()
        first_use = self._token_path is not None and self.issuer.first_use(scope["headers"])
        if kind == "expire" and (first_use or self._asks_token(scope)):
            kind = None  # a token is not revoked on its first use, nor a token request
        await self._serve(scope, receive, send, kind)

    async def _serve(self, scope: Scope, receive: Receive, send: Send, kind: str | None) -> None:
        plan = self._faults
        if kind is not None:
            self.device.faults[kind] += 1
        if kind is None:
            await self._routes(scope, receive, send)
        elif kind == "500":
            await _error(500, "injected-fault", "injected fault: internal error")(
                scope, receive, send
            )
        elif kind == "503":
            when = datetime.now(UTC) + timedelta(seconds=plan.retry_after)
            headers = {"Retry-After": format_http_date(when)}
            message = "injected fault: unavailable"
            await _error(503, "injected-fault", message, headers)(scope, receive, send)
        elif kind == "429":
            headers = {"Retry-After": str(plan.retry_after)}
            message = "injected fault: too many requests"
            await _error(429, "injected-fault", message, headers)(scope, receive, send)
        elif kind == "slow":
            # the device takes the whole request in, then is slow to act on it and answer
            replay = await buffered(receive)
            await asyncio.sleep(plan.slow_delay)
            await self._routes(scope, replay, send)
        elif kind == "malformed":
            body = b'{"job": {"id": "lb-'
            await Response(body, status_code=200, media_type="application/json")(
                scope, receive, send
            )
        elif kind == "expire":
            self.issuer.expire_all()
            await token_refused()(scope, receive, send)
        elif kind == "huge":
            await huge(send, plan.huge_size)
        elif kind == "lost":
            await self._routes(scope, receive, discard)
            await cut_off(send)
        else:  # "drop"
            await cut_off(send)


class DeviceSettings(TypedDict, total=False):
    """How the loopback device behaves (keyword arguments of :func:`create_app`, passed on
    unchanged by ``serve`` and ``running_device``); the defaults are create_app's."""

    queue_delay: float
    fault_rate: float
    seed: int
    faults: tuple[str, ...]
    slow_delay: float
    retry_after: int
    max_qubits: int
    max_jobs: int
    huge_size: int
    state: str | None
    preset: str
    token_ttl: float
    page_size: int


def create_app(
    *,
    token: str,
    queue_delay: float = 1.0,
    fault_rate: float = 0.0,
    seed: int = 0,
    faults: tuple[str, ...] = ALL_FAULTS,
    slow_delay: float = 35.0,
    retry_after: int = 1,
    max_qubits: int = 20,
    max_jobs: int = 100_000,
    huge_size: int = 200 * 1024 * 1024,
    state: str | None = None,
    preset: str = "loopback",
    token_ttl: float = 60.0,
    page_size: int = 100,
) -> LoopbackApp:
    """The loopback device as an ASGI application (for uvicorn, or httpx's ASGITransport).
    ``state`` is the SQLite file that keeps its jobs across restarts (None: in memory);
    ``preset`` the API shape it speaks (PRESETS); in the ``exchange`` and ``relay`` presets ``token`` is
    the OAuth client secret, access tokens live ``token_ttl`` seconds and samples come
    ``page_size`` to a page."""
    from jobkeeper.loopback._sim import check_program, simulate

    device = LoopbackDevice(
        state=DeviceState(state) if state is not None else None,
        queue_delay=queue_delay,
        seed=seed,
        max_qubits=max_qubits,
        max_jobs=max_jobs,
        simulate=simulate,
        check=check_program,
    )
    plan = FaultPlan(
        rate=fault_rate,
        kinds=tuple(faults),
        seed=seed,
        slow_delay=slow_delay,
        retry_after=retry_after,
        huge_size=huge_size,
    )
    return LoopbackApp(
        device, token=token, faults=plan, preset=preset, token_ttl=token_ttl, page_size=page_size
    )
