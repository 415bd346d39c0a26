"""RestBackend against httpx.MockTransport (no network): what it sends, how it reads the
device's answers, and which error each kind of failure becomes."""

from __future__ import annotations

import asyncio
import json
from collections.abc import Callable, Coroutine
from pathlib import Path
from typing import Any, TypeVar

import httpx
import pytest

from jobkeeper.backend import Task
from jobkeeper.backends.rest.adapter import RestBackend
from jobkeeper.backends.rest.http import (
    MAX_RETRY_AFTER,
    AnswerTooLarge,
    DeviceAuthError,
    DeviceForgotJob,
    InCallRetry,
    Timeouts,
)
from jobkeeper.backends.rest.profile import load_profile
from jobkeeper.circuit.ir import Circuit
from jobkeeper.exceptions import PermanentBackendError, TransientBackendError

T = TypeVar("T")
TOKEN = "tok-unit-0123456789"
ENV = {"DEV_TOKEN": TOKEN}
KEY = "sha256:" + "ab" * 32
EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "devices" / "tidewater-ion-shelf.toml"
FAST = InCallRetry(attempts=3, first_wait=0.0, max_wait=0.05)

Handler = Callable[[httpx.Request], httpx.Response]


def run(coro: Coroutine[Any, Any, T]) -> T:
    return asyncio.run(coro)


def task(*, qubits: int = 2, shots: int = 100, exact: bool = False, text: str = "x") -> Task:
    circuit = Circuit(num_qubits=qubits, num_clbits=qubits, qregs=(), cregs=(), operations=())
    return Task(circuit=circuit, shots=shots, seed=5, exact=exact, circuit_text=text)


def backend(
    handler: Handler,
    *,
    profile: str = "loopback",
    environ: dict[str, str] | None = None,
    retry: InCallRetry = FAST,
) -> RestBackend:
    return RestBackend(
        name="dev",
        profile=load_profile(profile),
        url="https://device.invalid",
        token_env="DEV_TOKEN",
        environ=ENV if environ is None else environ,
        retry=retry,
        timeouts=Timeouts(connect=1, read=1, write=1, pool=1),
        transport=httpx.MockTransport(handler),
    )


class Device:
    """A scripted device: answers by (method, path), recording every request."""

    def __init__(self, routes: dict[tuple[str, str], Any]) -> None:
        self.routes = routes
        self.requests: list[httpx.Request] = []

    def __call__(self, request: httpx.Request) -> httpx.Response:
        self.requests.append(request)
        answer = self.routes[(request.method, request.url.path)]
        if callable(answer):
            answer = answer(request)
        if isinstance(answer, httpx.Response):
            return answer
        return httpx.Response(200, json=answer)

    def count(self, method: str, path: str) -> int:
        return sum(1 for r in self.requests if (r.method, r.url.path) == (method, path))


CALIBRATION = {"calibration": {"invented": True, "t1_us": [100.0]}}


def loopback_device(
    state: str = "queued", extra: dict[tuple[str, str], Any] | None = None
) -> Device:
    routes: dict[tuple[str, str], Any] = {
        ("GET", "/v1/calibration"): CALIBRATION,
        ("POST", "/v1/jobs"): {"job": {"id": "lb-1", "state": "queued"}},
        ("GET", "/v1/jobs/lb-1"): {"job": {"id": "lb-1", "state": state, "message": "why"}},
        ("GET", "/v1/jobs/lb-1/result"): {
            "result": {"counts": {"00": 60, "11": 40}, "probabilities": None, "metadata": {"s": 1}}
        },
        ("POST", "/v1/jobs/lb-1/cancel"): {"job": {"id": "lb-1", "state": "cancelled"}},
    }
    routes.update(extra or {})
    return Device(routes)


# --------------------------------------------------------------------------- what is sent


def test_start_sends_the_profiles_request() -> None:
    device = loopback_device()
    started = run(backend(device).start(task(text="OPENQASM 2.0;"), client_key=KEY))
    assert started.handle == "lb-1"
    submit = next(r for r in device.requests if r.method == "POST")
    assert submit.url.path == "/v1/jobs"
    assert submit.headers["Authorization"] == f"Bearer {TOKEN}"
    # IETF draft-ietf-httpapi-idempotency-key-header: an RFC 8941 String, i.e. quoted.
    assert submit.headers["Idempotency-Key"] == f'"{KEY}"'
    assert submit.headers["User-Agent"].startswith("jobkeeper")
    assert json.loads(submit.content) == {
        "program": "OPENQASM 2.0;",
        "shots": 100,
        "seed": 5,
        "exact": False,
        "tag": KEY,
    }


def test_invented_example_profile_speaks_its_own_shape() -> None:
    runs = "/api/v2/runs"
    status = {
        "run": {
            "name": 77,
            "phase": "FINISHED",
            "outcome": {"histogram": {"01": 3}, "timing": {"ms": 4}},
        }
    }
    device = Device(
        {
            ("GET", "/api/v2/shelf/characterisation"): {"invented": True},
            ("POST", runs): {"run": {"name": 77, "phase": "PENDING"}},
            ("GET", f"{runs}/77"): status,
            ("DELETE", f"{runs}/77"): httpx.Response(204),
        }
    )
    rest = backend(device, profile=str(EXAMPLE))
    started = run(rest.start(task(), client_key=KEY))
    assert started.handle == "77"  # an integer id becomes a string handle
    submit = next(r for r in device.requests if r.method == "POST")
    assert submit.headers["X-Shelf-Key"] == TOKEN  # bare token, no scheme
    assert submit.headers["Idempotency-Key"] == KEY  # unquoted, as the profile says
    assert json.loads(submit.content) == {
        "run": {"source": "x", "repetitions": 100, "rng_seed": 5},
        "note": f"run for {KEY}",
    }
    polled = run(rest.poll("77"))
    assert polled.state == "done" and polled.result is not None
    assert polled.result.counts == {"01": 3}
    assert polled.result.metadata["device_metadata"] == {"ms": 4}
    run(rest.cancel("77"))
    assert device.count("DELETE", f"{runs}/77") == 1


# --------------------------------------------------------------------------- status mapping


@pytest.mark.parametrize(
    ("word", "state"),
    [
        ("queued", "waiting"),
        ("running", "waiting"),
        ("error", "failed"),
        ("cancelled", "cancelled"),
    ],
)
def test_status_words_map_to_our_states(word: str, state: str) -> None:
    polled = run(backend(loopback_device(word)).poll("lb-1"))
    assert polled.state == state
    if state == "failed":
        assert polled.message == "device job lb-1 ended 'error': why"


def test_done_fetches_the_result_with_metadata() -> None:
    device = loopback_device("complete")
    rest = backend(device)
    run(rest.start(task(), client_key=KEY))
    polled = run(rest.poll("lb-1"))
    assert polled.state == "done" and polled.result is not None
    assert polled.result.counts == {"00": 60, "11": 40}
    metadata = polled.result.metadata
    assert metadata["device_job"] == "lb-1" and metadata["device"] == "loopback"
    assert metadata["calibration"]["data"] == CALIBRATION["calibration"]
    assert metadata["profile_digest"].startswith("sha256:")
    assert device.count("GET", "/v1/jobs/lb-1/result") == 1


def test_unknown_status_word_is_permanent_and_names_the_known_ones() -> None:
    with pytest.raises(PermanentBackendError) as caught:
        run(backend(loopback_device("teleporting")).poll("lb-1"))
    assert "'teleporting'" in str(caught.value) and "complete, error" in str(caught.value)


def test_waiting_passes_the_retry_hint_on() -> None:
    answer = httpx.Response(200, json={"job": {"state": "queued"}}, headers={"Retry-After": "4"})
    device = loopback_device(extra={("GET", "/v1/jobs/lb-1"): answer})
    assert run(backend(device).poll("lb-1")).poll_after == 4.0


# --------------------------------------------------------------------------- errors


def failing(status: int, body: Any = None, headers: dict[str, str] | None = None) -> Device:
    answer = httpx.Response(status, json=body, headers=headers)
    return loopback_device(extra={("POST", "/v1/jobs"): answer})


def test_400_is_permanent_with_the_devices_message() -> None:
    device = failing(400, {"error": {"message": "line 3: expected ';'"}})
    with pytest.raises(PermanentBackendError) as caught:
        run(backend(device).start(task(), client_key=KEY))
    assert str(caught.value) == "device rejected the job (400): line 3: expected ';'"
    assert device.count("POST", "/v1/jobs") == 1  # never retried


@pytest.mark.parametrize("status", [401, 403])
def test_refused_token_names_the_variable_never_the_token(status: int) -> None:
    # the device even echoes the token back: it must not reach our message
    device = failing(status, {"error": {"message": f"token {TOKEN} unknown"}})
    with pytest.raises(DeviceAuthError) as caught:
        run(backend(device).start(task(), client_key=KEY))
    message = str(caught.value)
    assert "environment variable DEV_TOKEN is missing or wrong" in message
    assert TOKEN not in message and TOKEN not in repr(caught.value)
    assert "[redacted]" in message


def test_missing_token_variable_fails_before_any_request() -> None:
    device = loopback_device()
    with pytest.raises(DeviceAuthError, match="environment variable DEV_TOKEN is not set"):
        run(backend(device, environ={}).start(task(), client_key=KEY))
    assert device.requests == []


def test_429_with_a_long_retry_after_goes_straight_back_to_the_queue() -> None:
    device = failing(429, {"error": {"message": "slow down"}}, {"Retry-After": "30"})
    with pytest.raises(TransientBackendError) as caught:
        run(backend(device).start(task(), client_key=KEY))
    assert caught.value.retry_after == 30.0
    assert device.count("POST", "/v1/jobs") == 1


def test_short_retry_after_is_retried_in_call_with_the_same_key() -> None:
    answers = iter(
        [
            httpx.Response(503, headers={"Retry-After": "0"}),
            httpx.Response(500),
            httpx.Response(201, json={"job": {"id": "lb-1"}}),
        ]
    )
    device = loopback_device(extra={("POST", "/v1/jobs"): lambda request: next(answers)})
    assert run(backend(device).start(task(), client_key=KEY)).handle == "lb-1"
    keys = {r.headers["Idempotency-Key"] for r in device.requests if r.method == "POST"}
    assert keys == {f'"{KEY}"'} and device.count("POST", "/v1/jobs") == 3


def test_retry_after_is_clamped() -> None:
    device = failing(503, None, {"Retry-After": "999999"})
    with pytest.raises(TransientBackendError) as caught:
        run(backend(device).start(task(), client_key=KEY))
    assert caught.value.retry_after == MAX_RETRY_AFTER


def test_5xx_is_transient_after_the_in_call_attempts() -> None:
    device = failing(502, {"error": {"message": "gateway"}})
    with pytest.raises(TransientBackendError, match=r"\(502\): gateway"):
        run(backend(device).start(task(), client_key=KEY))
    assert device.count("POST", "/v1/jobs") == FAST.attempts


def test_malformed_json_is_transient() -> None:
    broken = httpx.Response(200, content=b'{"job": {', headers={"content-type": "application/json"})
    device = loopback_device(extra={("GET", "/v1/jobs/lb-1"): broken})
    with pytest.raises(TransientBackendError, match="not valid JSON"):
        run(backend(device).poll("lb-1"))


@pytest.mark.parametrize(
    "error",
    [httpx.ConnectError("refused"), httpx.ReadTimeout("slow"), httpx.RemoteProtocolError("x")],
)
def test_lost_submission_is_transient_and_says_it_may_have_been_accepted(
    error: httpx.HTTPError,
) -> None:
    def submit(request: httpx.Request) -> httpx.Response:
        raise error

    device = loopback_device(extra={("POST", "/v1/jobs"): submit})
    with pytest.raises(TransientBackendError, match="may have been accepted") as caught:
        run(backend(device).start(task(), client_key=KEY))
    assert caught.value.retry_after is None


def test_answer_without_the_promised_value_is_permanent() -> None:
    device = loopback_device(extra={("POST", "/v1/jobs"): {"job": {}}})
    with pytest.raises(PermanentBackendError, match="does not match profile 'loopback'"):
        run(backend(device).start(task(), client_key=KEY))
    bad_counts = {"result": {"counts": {"0x": 3}}}
    device = loopback_device("complete", {("GET", "/v1/jobs/lb-1/result"): bad_counts})
    with pytest.raises(PermanentBackendError, match="'0x' is not a bit string"):
        run(backend(device).poll("lb-1"))


def test_tasks_the_device_cannot_take_fail_before_sending() -> None:
    device = loopback_device()
    with pytest.raises(PermanentBackendError, match="at most 20"):
        run(backend(device).start(task(qubits=21), client_key=KEY))
    example = Device({})
    with pytest.raises(PermanentBackendError, match="not exact probabilities"):
        run(backend(example, profile=str(EXAMPLE)).start(task(exact=True), client_key=KEY))
    with pytest.raises(PermanentBackendError, match="no circuit text"):
        run(backend(device).start(task(text=" "), client_key=KEY))
    assert device.requests == [] and example.requests == []


# --------------------------------------------------------------------------- cancel, calibration


def test_cancel_of_an_ended_job_is_not_an_error() -> None:
    gone = httpx.Response(409, json={"error": {"message": "already ended"}})
    device = loopback_device(extra={("POST", "/v1/jobs/lb-1/cancel"): gone})
    run(backend(device).cancel("lb-1"))
    missing = httpx.Response(404, json={"error": {"message": "no job"}})
    device = loopback_device(extra={("POST", "/v1/jobs/lb-1/cancel"): missing})
    with pytest.raises(PermanentBackendError, match=r"device rejected the cancel request \(404\)"):
        run(backend(device).cancel("lb-1"))


def test_calibration_is_cached_and_refreshable() -> None:
    device = loopback_device()

    async def scenario() -> RestBackend:
        rest = backend(device)
        await rest.start(task(), client_key=KEY)
        await rest.start(task(), client_key=KEY)
        assert device.count("GET", "/v1/calibration") == 1
        snapshot = await rest.refresh_calibration(force=True)
        assert snapshot is not None and snapshot["data"] == CALIBRATION["calibration"]
        await rest.aclose()
        return rest

    rest = run(scenario())
    assert device.count("GET", "/v1/calibration") == 2
    assert rest.info.calibration is not None
    assert rest.info.calibration["device"] == "loopback"


# --------------------------------------------------------------------------- hostile answers


def test_a_job_id_longer_than_a_kibibyte_is_refused() -> None:
    device = loopback_device(extra={("POST", "/v1/jobs"): {"job": {"id": "x" * 1025}}})
    with pytest.raises(PermanentBackendError, match="1025 bytes long; at most 1024"):
        run(backend(device).start(task(), client_key=KEY))


def test_an_announced_answer_beyond_max_answer_is_not_read() -> None:
    big = httpx.Response(200, headers={"Content-Length": "5000000"}, content=b"{}")
    device = loopback_device(extra={("POST", "/v1/jobs"): big})
    with pytest.raises(AnswerTooLarge, match="larger than 4194304 bytes"):
        run(backend(device).start(task(), client_key=KEY))


def test_a_forgotten_job_fails_and_is_not_sent_again() -> None:
    gone = httpx.Response(404, json={"error": {"message": "no job 'lb-1'"}})
    device = loopback_device(extra={("GET", "/v1/jobs/lb-1"): gone})
    with pytest.raises(DeviceForgotJob, match="no longer knows this job") as caught:
        run(backend(device).poll("lb-1"))
    assert "rerun" in str(caught.value)
    assert device.count("POST", "/v1/jobs") == 0 and device.count("GET", "/v1/jobs/lb-1") == 1


def test_a_failure_message_echoing_the_token_is_redacted() -> None:
    failed = {"job": {"id": "lb-1", "state": "error", "message": f"bad {TOKEN.upper()}"}}
    device = loopback_device(extra={("GET", "/v1/jobs/lb-1"): failed})
    polled = run(backend(device).poll("lb-1"))
    assert polled.state == "failed" and polled.message.endswith("bad [redacted]")
