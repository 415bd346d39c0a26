"""Profile format 2 against httpx.MockTransport (no network): OAuth client credentials,
Location handles, repeats answered 303 or 409, form bodies, pages, numeric status."""

from __future__ import annotations

import asyncio
import base64
from typing import Any
from urllib.parse import parse_qsl

import httpx
import pytest

from jobkeeper.backend import Task
from jobkeeper.backends.rest.adapter import RestBackend
from jobkeeper.backends.rest.http import InCallRetry, Timeouts
from jobkeeper.backends.rest.profile import parse_profile
from jobkeeper.circuit import circuit_hash, parse_qasm
from jobkeeper.exceptions import PermanentBackendError

KEY = "sha256:" + "cd" * 32
ENV = {"CID": "client:one", "CSECRET": "s3cret/with+chars"}
PROGRAM = (
    'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[3];\ncreg a[2];\ncreg b[1];\n'
    "measure q[0] -> a[0];\nmeasure q[1] -> a[1];\nmeasure q[2] -> b[0];\n"
)


def profile(**changes: Any) -> Any:
    data: dict[str, Any] = {
        "format": 2,
        "device": {"name": "invented"},
        "auth": {"kind": "client_credentials", "token_request": {"path": "/token"}},
        "requests": {
            "submit": {"path": "/runs", "body": {"src": "{circuit}", "n": "{shots}"},
                       "handle_from": "location", "body_format": "form"},
            "status": {"path": "/runs/{handle}", "state": "/code"},
            "result": {"path": "/runs/{handle}/shots"},
        },
        "results": {"samples": "/shots", "encoding": "integers", "bit_order": "c0_right",
                    "pages": {"next": "/next"}},
        "states": {"1": "waiting", "2": "done", "3": "failed"},
    }  # fmt: skip
    for path, value in changes.items():
        *parents, last = path.split("__")
        target = data
        for part in parents:
            target = target.setdefault(part, {})
        if value is None:
            target.pop(last, None)
        else:
            target[last] = value
    return parse_profile(data, source="test.toml")


class Device:
    """A scripted invented device: tokens, runs behind Locations, paged integer shots."""

    def __init__(self, shots: list[int], page: int = 3) -> None:
        self.shots, self.page = shots, page
        self.requests: list[httpx.Request] = []
        self.tokens = 0
        self.refuse_next = 0
        self.submit_answer: httpx.Response | None = None

    def __call__(self, request: httpx.Request) -> httpx.Response:
        self.requests.append(request)
        path = request.url.path.removeprefix("/api")
        if path == "/token":
            self.tokens += 1
            return httpx.Response(200, json={"access_token": f"tok-{self.tokens}",
                                             "token_type": "Bearer", "expires_in": 3600})  # fmt: skip
        if self.refuse_next:
            self.refuse_next -= 1
            return httpx.Response(401, json={"error": "invalid_token"})
        if path == "/runs":
            return self.submit_answer or httpx.Response(201, headers={"Location": "runs/r-7"})
        if path == "/runs/r-7":
            return httpx.Response(200, json={"code": 2})
        if path == "/runs/r-7/shots":
            start = int(request.url.params.get("from", "0"))
            end = start + self.page
            more = {"next": f"shots?from={end}"} if end < len(self.shots) else {}
            return httpx.Response(200, json={"shots": self.shots[start:end], **more})
        return httpx.Response(404, json={})


def backend(device: Device, spec: Any = None) -> RestBackend:
    return RestBackend(
        name="dev", profile=spec or profile(), url="https://device.invalid/api/",
        client_id_env="CID", client_secret_env="CSECRET", environ=ENV,
        retry=InCallRetry(attempts=2, first_wait=0.0, max_wait=0.01),
        timeouts=Timeouts(connect=1, read=1, write=1, pool=1),
        transport=httpx.MockTransport(device),
    )  # fmt: skip


def task(shots: int) -> Task:
    return Task(circuit=parse_qasm(PROGRAM), shots=shots, seed=1, circuit_text=PROGRAM)


async def _run(device: Device, shots: int, spec: Any = None) -> tuple[str, Any]:
    rest = backend(device, spec)
    try:
        started = await rest.start(task(shots), client_key=KEY)
        assert started.handle is not None
        return started.handle, await rest.poll(started.handle)
    finally:
        await rest.aclose()


def test_token_exchange_location_handle_form_body_and_pages() -> None:
    # shots as integers, bit k = c[k]: 5 = c0 1, c1 0, c2 1 -> a = 01, b = 1
    device = Device([5, 5, 0, 3, 5, 0, 3])
    handle, polled = asyncio.run(_run(device, 7))
    assert handle == "shots=7;registers=2,1;job=r-7"
    # keys (DESIGN): a (first declared) leftmost, its highest bit leftmost, "|", then b
    assert polled.state == "done" and polled.result.counts == {"01|1": 3, "00|0": 2, "11|0": 2}
    token, submit = device.requests[0], device.requests[1]
    # RFC 6749 §4.4.2: form-encoded grant_type=client_credentials; §2.3.1: HTTP Basic
    # with the id and secret form-urlencoded first ("client:one" -> "client%3Aone")
    assert dict(parse_qsl(token.content.decode())) == {"grant_type": "client_credentials"}
    basic = base64.b64decode(token.headers["authorization"].removeprefix("Basic ")).decode()
    assert basic == "client%3Aone:s3cret%2Fwith%2Bchars"
    assert submit.headers["content-type"] == "application/x-www-form-urlencoded"
    assert dict(parse_qsl(submit.content.decode())) == {"src": PROGRAM, "n": "7"}
    assert submit.headers["authorization"] == "Bearer tok-1"
    # the Location "runs/r-7" was resolved against https://device.invalid/api/runs
    # (RFC 3986 §5.2): https://device.invalid/api/runs/r-7 -> last segment r-7
    assert [r.url.path for r in device.requests[2:]] == [
        "/api/runs/r-7", "/api/runs/r-7/shots", "/api/runs/r-7/shots", "/api/runs/r-7/shots",
    ]  # fmt: skip
    assert device.tokens == 1  # cached for its expires_in


def test_a_refused_token_is_fetched_again_once() -> None:
    device = Device([0, 0])
    device.refuse_next = 1
    _, polled = asyncio.run(_run(device, 2))
    assert polled.state == "done" and device.tokens == 2


def test_a_short_result_is_an_error() -> None:
    with pytest.raises(PermanentBackendError, match="add up to 4 shots; 5 were asked for"):
        asyncio.run(_run(Device([0, 1, 2, 3]), 5))


def test_the_whole_location_path_can_be_the_handle() -> None:
    spec = profile(
        requests__submit__handle_part="path",
        requests__status__path="{handle}",
        requests__result__path="{handle}/shots",
    )
    device = Device([1])
    handle, polled = asyncio.run(_run(device, 1, spec))
    assert handle.endswith(";job=/api/runs/r-7") and polled.result.counts == {"01|0": 1}


@pytest.mark.parametrize(
    ("answer", "repeats", "reason"),
    [
        (httpx.Response(201, headers={"Location": "https://elsewhere.invalid/r"}), "same",
         "another origin"),
        (httpx.Response(200, json={"job": "r-7"}), "existing", "no Content-Location header"),
    ],
)  # fmt: skip
def test_an_answer_that_names_no_job_on_this_device_is_refused(
    answer: httpx.Response, repeats: str, reason: str
) -> None:
    device = Device([1])
    device.submit_answer = answer
    with pytest.raises(PermanentBackendError, match=reason):
        asyncio.run(_run(device, 1, profile(requests__submit__repeats=repeats)))


@pytest.mark.parametrize("answer", ["see_other", "conflict", "existing"])
def test_repeats_take_the_existing_job(answer: str) -> None:
    if answer == "see_other":  # RFC 9110 §15.4.4
        reply = httpx.Response(303, headers={"Location": "/api/runs/r-7"})
        spec = profile(requests__submit__repeats="see_other")
    elif answer == "existing":  # RFC 9110 §8.7: a POST's 200 names its result's resource
        reply = httpx.Response(200, headers={"Content-Location": "/api/runs/r-7"})
        spec = profile(requests__submit__repeats="existing")
    else:  # RFC 9110 §15.5.10, the existing job named in the answer
        reply = httpx.Response(409, json={"existing": {"id": "r-7"}})
        spec = profile(requests__submit__repeats="conflict",
                       requests__submit__conflict_handle="/existing/id")  # fmt: skip
    device = Device([3])
    device.submit_answer = reply
    handle, polled = asyncio.run(_run(device, 1, spec))
    assert handle.endswith(";job=r-7") and polled.result.counts == {"11|0": 1}
    assert sum(1 for r in device.requests if r.url.path == "/api/runs") == 1


def test_numbered_pages_and_counts_by_hex_with_c0_left() -> None:
    spec = profile(
        results__samples=None, results__counts="/counts", results__encoding="hex",
        results__bit_order="c0_left",
        results__pages={"number_parameter": "page", "first_number": 1, "count": "/pages"},
    )  # fmt: skip

    class Numbered(Device):
        def __call__(self, request: httpx.Request) -> httpx.Response:
            if request.url.path.endswith("/shots"):  # numbered pages
                self.requests.append(request)
                page = int(request.url.params.get("page", "1"))
                # c0_left: "0x4" is digits 100 -> c0 = 1; "0x1" is 001 -> c2 = 1
                counts = {1: {"0x4": 2}, 2: {"0x1": 3, "0x4": 1}}[page]
                return httpx.Response(200, json={"counts": counts, "pages": 2})
            return super().__call__(request)

    device = Numbered([])
    _, polled = asyncio.run(_run(device, 6, spec))
    assert polled.result.counts == {"01|0": 3, "00|1": 3}
    assert [r.url.params.get("page") for r in device.requests if r.url.path.endswith("shots")] == [
        None, "2",
    ]  # fmt: skip


def test_the_program_goes_as_openqasm_3_when_the_profile_says_so() -> None:
    device = Device([0, 0])
    asyncio.run(_run(device, 2, profile(requests__submit__program="openqasm3")))
    sent = dict(parse_qsl(device.requests[1].content.decode()))["src"]
    assert sent.startswith("OPENQASM 3.0;\n")
    assert circuit_hash(parse_qasm(sent)) == circuit_hash(parse_qasm(PROGRAM))


def test_a_circuit_with_an_opaque_gate_cannot_go_as_openqasm_3() -> None:
    text = PROGRAM.replace("creg b[1];\n", "creg b[1];\nopaque magic a;\nmagic q[0];\n")
    rest = backend(Device([0]), profile(requests__submit__program="openqasm3"))
    job = Task(circuit=parse_qasm(text), shots=1, seed=1, circuit_text=text)
    with pytest.raises(PermanentBackendError, match="no opaque gates"):
        asyncio.run(rest.start(job, client_key=KEY))
