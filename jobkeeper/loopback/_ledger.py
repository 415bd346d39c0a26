"""The loopback device's ``ledger`` preset: the same device behind a third API shape,
rehearsing the rest of what profile format 2 describes.

- a static key in an ``X-Ledger-Key`` header (no scheme);
- ``POST /v3/tickets``: a JSON body (``text``, ``count``, ``seed``), answered 200 with the
  ticket's reference at ``/ticket/ref``; a repeated Idempotency-Key is answered 409 with
  the existing ticket's reference at ``/conflict/ref``;
- ``GET /v3/tickets/{ref}``: a status word and a reason;
- ``GET /v3/tickets/{ref}/shots?page=N``: per-shot samples as arrays of 0/1 with element
  0 being c[0], pages numbered from 1, the number of pages at ``/pages``;
- ``DELETE /v3/tickets/{ref}``.

The API shape is our own invention (``jobkeeper/profiles/loopback-ledger.toml`` speaks
it).
"""

from __future__ import annotations

import json
from typing import Any

from starlette.requests import Request
from starlette.responses import JSONResponse, Response
from starlette.routing import Route

from jobkeeper.loopback._device import LoopbackDevice
from jobkeeper.loopback._outcomes import shot_record

WORDS = {"queued": "filed", "running": "working", "complete": "settled",
         "error": "void", "cancelled": "withdrawn"}  # fmt: skip


def ledger_routes(device: LoopbackDevice, page_size: int) -> list[Route]:
    async def submit(request: Request) -> Response:
        key = request.headers.get("idempotency-key")
        try:
            sent: Any = json.loads(await request.body())
        except (ValueError, UnicodeDecodeError):
            return JSONResponse({"error": {"message": "the body is not JSON"}}, status_code=400)
        if not isinstance(sent, dict):
            return JSONResponse({"error": {"message": "send an object"}}, status_code=400)
        body = {"program": sent.get("text"), "shots": sent.get("count"),
                "seed": sent.get("seed"), "exact": False}  # fmt: skip
        created, job = device.submit(key, body)
        if not created:
            return JSONResponse(
                {"error": {"message": "this key was used"}, "conflict": {"ref": job.id}},
                status_code=409,
            )
        return JSONResponse({"ticket": {"ref": job.id}})

    async def status(request: Request) -> Response:
        job = device.job(request.path_params["ref"])
        return JSONResponse({"ticket": {"word": WORDS[job.state], "reason": job.message}})

    async def shots(request: Request) -> Response:
        # each shot's classical bits, c[0] first
        every = await shot_record(device, request.path_params["ref"], list)
        pages = max(1, -(-len(every) // page_size))
        number = int(request.query_params.get("page", "1") or 1)
        page = every[(number - 1) * page_size : number * page_size]
        return JSONResponse({"shots": page, "page": number, "pages": pages})

    async def cancel(request: Request) -> Response:
        job = device.cancel(request.path_params["ref"])
        return JSONResponse({"ticket": {"word": WORDS[job.state], "reason": job.message}})

    return [
        Route("/v3/tickets", submit, methods=["POST"]),
        Route("/v3/tickets/{ref}", status, methods=["GET"]),
        Route("/v3/tickets/{ref}", cancel, methods=["DELETE"]),
        Route("/v3/tickets/{ref}/shots", shots, methods=["GET"]),
    ]
