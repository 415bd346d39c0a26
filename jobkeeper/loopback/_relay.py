"""The loopback device's ``relay`` preset: the same device behind a fourth API shape, of
our own invention, rehearsing what the ``exchange`` and ``ledger`` presets leave out.

- OAuth 2.0 client credentials (RFC 6749 §4.4) at ``POST /v4/token``, the client's id
  and secret sent as form fields (§2.3.1); short-lived bearer tokens, as in ``exchange``;
- ``POST /v4/jobs``: a JSON body (``qasm3``, ``shots``, ``seed``) whose program must be
  OpenQASM 3 text (a 2.0 text is refused with 400); answered 202 with a ``Location`` of
  ``/v4/queues/{queue}/jobs/{id}``, the queue being the device's own choice, so only the
  whole path names the job; a repeated Idempotency-Key is answered 200 with the existing
  job, named by ``Content-Location`` (RFC 9110 §8.7);
- ``GET /v4/queues/{queue}/jobs/{id}``: a phase word and a detail;
- ``GET /v4/queues/{queue}/jobs/{id}/outcomes?form=F``: the outcomes in the form the
  client asks for (``FORMS``), ``page_size`` entries to a page, the next page's URL at
  ``/next`` (null on the last), written alternately as an absolute URL and as a
  reference relative to the page's own (RFC 3986 §4.2);
- ``POST /v4/queues/{queue}/jobs/{id}/withdraw``, ``GET /v4/calibration``.

The device records the circuit hash of every program it accepted (``extra``), so that a
test can check it runs the very circuit it was sent. ``jobkeeper/profiles/loopback-relay.toml``
speaks this shape.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from typing import Any

from starlette.requests import Request
from starlette.responses import JSONResponse, Response
from starlette.routing import Route

from jobkeeper.exceptions import JobkeeperError
from jobkeeper.loopback._device import LoopbackDevice, Rejection
from jobkeeper.loopback._exchange import TokenIssuer, idempotency_key, token_route
from jobkeeper.loopback._outcomes import c0_first, run_counts, shot_record, value_of

PHASES = {"queued": "pending", "running": "active", "complete": "finished",
          "error": "faulted", "cancelled": "withdrawn"}  # fmt: skip
QUEUES = ("east", "west")
#: the path of the token endpoint.
TOKEN_PATH = "/v4/token"


def _bits_c0_left(bits: list[int]) -> str:
    return "".join(str(b) for b in bits)


def _bits_c0_right(bits: list[int]) -> str:
    return "".join(str(b) for b in reversed(bits))


#: outcome forms: (per shot?, how one outcome is written from its bits, c[0] first)
FORMS: dict[str, tuple[bool, Callable[[list[int]], Any]]] = {
    "hex-counts": (False, lambda bits: hex(value_of(bits))),  # "0x5": bit k is c[k]
    "decimal-counts": (False, lambda bits: str(value_of(bits))),  # "5"
    "bit-counts": (False, _bits_c0_left),  # "101...": c[0] leftmost
    "bit-shots": (True, _bits_c0_right),  # "...101": c[0] rightmost
    "integer-shots": (True, value_of),  # 5: bit k is c[k]
}


def queue_of(job_id: str) -> str:
    """The queue the device put a job in (by its number)."""
    digits = "".join(ch for ch in job_id if ch.isdigit())
    return QUEUES[int(digits or "0") % len(QUEUES)]


def _job_path(job_id: str) -> str:
    return f"/v4/queues/{queue_of(job_id)}/jobs/{job_id}"


def _circuit_hash(text: str) -> str:
    from jobkeeper.circuit import circuit_hash, parse_qasm
    from jobkeeper.circuit.qasm3 import language_version

    if language_version(text) != 3:
        raise Rejection(400, "not-openqasm3", "this device reads OpenQASM 3 programs only")
    try:
        return circuit_hash(parse_qasm(text))
    except JobkeeperError as exc:
        raise Rejection(400, "invalid-program", f"invalid program: {exc}") from None


def relay_routes(device: LoopbackDevice, issuer: TokenIssuer, page_size: int) -> list[Route]:
    def job_of(request: Request) -> Any:
        job_id = request.path_params["job"]
        if request.path_params["queue"] != queue_of(job_id):
            raise Rejection(404, "no-such-job", f"no job {job_id!r} in that queue")
        return device.job(job_id)

    async def submit(request: Request) -> Response:
        key = idempotency_key(request)
        try:
            sent: Any = json.loads(await request.body())
        except (ValueError, UnicodeDecodeError):
            raise Rejection(400, "bad-request", "the body is not JSON") from None
        if not isinstance(sent, dict) or not isinstance(sent.get("qasm3"), str):
            detail = "send an object with the program's OpenQASM 3 text at qasm3"
            raise Rejection(400, "bad-request", detail)
        body = {"program": sent["qasm3"], "shots": sent.get("shots"),
                "seed": sent.get("seed"), "exact": False}  # fmt: skip
        received = _circuit_hash(sent["qasm3"])
        created, job = device.submit(key, body)
        where = _job_path(job.id)
        view = {"job": {"id": job.id, "phase": PHASES[job.state]}}
        if not created:  # the existing job, as RFC 9110 §8.7 names a POST's result
            return JSONResponse(view, status_code=200, headers={"Content-Location": where})
        device.note(job, circuit_hash=received)
        return JSONResponse(view, status_code=202, headers={"Location": where})

    async def status(request: Request) -> Response:
        job = job_of(request)
        left = device.seconds_left(job)
        headers = {"Retry-After": str(int(left))} if left >= 1 else {}
        view = {"phase": PHASES[job.state], "detail": job.message}
        return JSONResponse({"job": view}, headers=headers)

    async def outcomes(request: Request) -> Response:
        job = job_of(request)
        form = request.query_params.get("form", "hex-counts")
        if form not in FORMS:
            raise Rejection(400, "unknown-form", f"form is one of {', '.join(FORMS)}")
        per_shot, write = FORMS[form]
        entries: list[Any]
        if per_shot:
            entries = await shot_record(device, job.id, write)
        else:
            _, counts = await run_counts(device, job.id)
            entries = sorted((write(c0_first(key)), n) for key, n in counts.items())
        after = int(request.query_params.get("after", "0") or 0)
        page = entries[after : after + page_size]
        following = after + page_size
        link = None
        if following < len(entries):
            # alternately absolute and relative, so that a client meets both
            link = (
                f"outcomes?form={form}&after={following}"
                if (following // page_size) % 2
                else str(request.url.include_query_params(form=form, after=following))
            )
        shown: Any = page if per_shot else dict(page)
        return JSONResponse({"outcomes": shown, "next": link})

    async def withdraw(request: Request) -> Response:
        job = device.cancel(job_of(request).id)
        return JSONResponse({"job": {"phase": PHASES[job.state], "detail": job.message}})

    async def calibration(request: Request) -> Response:
        return JSONResponse({"calibration": device.calibration})

    job_path = "/v4/queues/{queue}/jobs/{job}"
    return [
        token_route(issuer, TOKEN_PATH),
        Route("/v4/jobs", submit, methods=["POST"]),
        Route(job_path, status, methods=["GET"]),
        Route(f"{job_path}/outcomes", outcomes, methods=["GET"]),
        Route(f"{job_path}/withdraw", withdraw, methods=["POST"]),
        Route("/v4/calibration", calibration, methods=["GET"]),
    ]
