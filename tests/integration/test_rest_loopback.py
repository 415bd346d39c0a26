"""The REST adapter against the loopback device over real HTTP on 127.0.0.1.

The tests call the adapter directly and drive start → poll loops the way the worker does
(a bounded number of rounds, each wait capped), retrying on TransientBackendError and
honouring its retry_after. Worker-level acceptance tests come separately.
"""

from __future__ import annotations

import asyncio
import logging
import time
from collections import Counter
from collections.abc import Callable, Iterator
from contextlib import ExitStack
from typing import Any

import pytest
from scipy.stats import chisquare

from jobkeeper.backend import Polled, Task
from jobkeeper.backends.rest.adapter import DeviceAuthError, RestBackend, from_config
from jobkeeper.circuit import parse_qasm
from jobkeeper.exceptions import PermanentBackendError, TransientBackendError
from jobkeeper.loopback import ALL_FAULTS
from jobkeeper.loopback.testing import RunningDevice, running_device

BELL = """OPENQASM 2.0;
include "qelib1.inc";
qreg q[2];
creg c[2];
h q[0];
cx q[0],q[1];
measure q -> c;
"""

#: client settings for tests: a read timeout below the device's 1 s slow faults.
FAST_CLIENT = {
    "timeout": {"connect": 2.0, "read": 0.5, "write": 2.0, "pool": 20.0},
    "max_connections": 100,
    "retry": {"attempts": 3, "first_wait": 0.05, "max_wait": 1.5},
}
NO_IN_CALL_RETRY = {**FAST_CLIENT, "retry": {"attempts": 1}}

StartDevice = Callable[..., RunningDevice]


@pytest.fixture
def loopback(
    monkeypatch: pytest.MonkeyPatch, caplog: pytest.LogCaptureFixture
) -> Iterator[StartDevice]:
    """Starts loopback devices (real uvicorn servers on 127.0.0.1, free ports) with the
    token in the environment; stops them all afterwards, and fails the test if the
    server logged an error (an exception inside the device)."""
    with ExitStack() as stack:

        def start(**settings: Any) -> RunningDevice:
            device = stack.enter_context(running_device(**settings))
            monkeypatch.setenv(device.token_env, device.token)
            return device

        yield start
    records = caplog.get_records("setup") + caplog.get_records("call") + caplog.records
    errors = [
        r.getMessage()
        for r in records
        if r.name.startswith("uvicorn") and r.levelno >= logging.ERROR
    ]
    assert not errors, errors


def key(i: int) -> str:
    return f"sha256:{i:064x}"


def bell(shots: int, seed: int | None) -> Task:
    return Task(circuit=parse_qasm(BELL), shots=shots, seed=seed, circuit_text=BELL)


async def drive(
    backend: RestBackend, task: Task, client_key: str, *, rounds: int = 300, limit: float = 45.0
) -> Polled:
    """What the worker does: start until a handle is stored, then poll until the job
    ends; transient errors are retried after their retry_after (capped), in bounded
    rounds and time."""
    handle: str | None = None
    deadline = time.monotonic() + limit
    for _ in range(rounds):
        if time.monotonic() > deadline:
            break
        try:
            if handle is None:
                handle = (await backend.start(task, client_key=client_key)).handle
                continue
            polled = await backend.poll(handle)
            if polled.state != "waiting":
                return polled
            await asyncio.sleep(min(polled.poll_after or 0.05, 1.0))
        except TransientBackendError as exc:
            await asyncio.sleep(min(exc.retry_after if exc.retry_after is not None else 0.05, 2.0))
    raise AssertionError(f"job {client_key[:16]} did not finish in {rounds} rounds / {limit} s")


def test_two_hundred_jobs_through_faults_run_once_each(loopback: StartDevice) -> None:
    device = loopback(fault_rate=0.3, seed=20261201, queue_delay=0.1, slow_delay=1.0)
    backend = from_config("rehearsal", device.backend_config(**FAST_CLIENT))
    jobs, shots = 200, 100

    async def scenario() -> list[Polled]:
        gate = asyncio.Semaphore(100)

        async def one(i: int) -> Polled:
            async with gate:
                return await drive(backend, bell(shots, seed=i), key(i))

        try:
            return await asyncio.gather(*(one(i) for i in range(jobs)))
        finally:
            await backend.aclose()

    started = time.monotonic()
    results = asyncio.run(scenario())
    elapsed = time.monotonic() - started

    assert [p.state for p in results] == ["done"] * jobs
    stats = device.stats()
    assert stats["executions"] == jobs
    assert stats["duplicates"] == 0
    assert stats["payload_duplicates"] == 0
    assert stats["jobs"] == jobs
    assert set(stats["faults"]) == set(ALL_FAULTS), stats["faults"]
    assert stats["replays"] > 0  # lost and slow submissions were retried with their key
    assert elapsed < 45, f"{elapsed:.1f} s"

    # Every Bell pair reads 00 or 11; pooled over the jobs, the two are equally likely.
    # Check: scipy.stats.chisquare against 50/50 at α = 0.01 (DESIGN §5: a reference
    # library's test of distributions; the 50/50 split is the textbook Bell state,
    # Nielsen & Chuang §1.3.6).
    total: Counter[str] = Counter()
    for polled in results:
        assert polled.result is not None and polled.result.counts is not None
        assert sum(polled.result.counts.values()) == shots
        total.update(polled.result.counts)
    assert set(total) <= {"00", "11"}
    observed = [total["00"], total["11"]]
    assert chisquare(observed, [jobs * shots / 2] * 2).pvalue > 0.01, observed


def test_bell_counts_of_one_job_are_consistent_with_half_and_half(loopback: StartDevice) -> None:
    device = loopback()
    backend = from_config("rehearsal", device.backend_config())
    polled = asyncio.run(_drive_and_close(backend, bell(4000, seed=11), key(1)))
    assert polled.result is not None and polled.result.counts is not None
    counts = polled.result.counts
    assert set(counts) <= {"00", "11"}
    # scipy.stats.chisquare, α = 0.01, expected 2000/2000 (Bell state: Nielsen & Chuang §1.3.6)
    assert chisquare([counts.get("00", 0), counts.get("11", 0)]).pvalue > 0.01, counts
    assert polled.result.metadata["calibration"]["data"]["invented"] is True
    assert backend.info.calibration is not None


async def _drive_and_close(backend: RestBackend, task: Task, client_key: str) -> Polled:
    try:
        return await drive(backend, task, client_key)
    finally:
        await backend.aclose()


async def _start_and_close(backend: RestBackend, task: Task, client_key: str) -> str | None:
    try:
        return (await backend.start(task, client_key=client_key)).handle
    finally:
        await backend.aclose()


def test_invalid_circuit_is_permanent_with_the_devices_message(loopback: StartDevice) -> None:
    device = loopback()
    backend = from_config("rehearsal", device.backend_config())
    broken = Task(
        circuit=parse_qasm(BELL),
        shots=10,
        circuit_text='OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\nfrobnicate q[0];\n',
    )
    with pytest.raises(PermanentBackendError) as caught:
        asyncio.run(_start_and_close(backend, broken, key(1)))
    message = str(caught.value)
    assert message.startswith("device rejected the job (400): invalid program:")
    assert "frobnicate" in message
    assert device.stats()["jobs"] == 0


def test_zero_shots_is_refused_by_the_device(loopback: StartDevice) -> None:
    device = loopback()
    backend = from_config("rehearsal", device.backend_config())
    with pytest.raises(PermanentBackendError, match=r"\(400\): shots must be positive, not 0"):
        asyncio.run(_start_and_close(backend, bell(0, seed=1), key(1)))


def test_wrong_token_says_so_without_printing_it(
    loopback: StartDevice, monkeypatch: pytest.MonkeyPatch
) -> None:
    device = loopback()
    wrong = "wrong-token-5f3a9c"
    monkeypatch.setenv(device.token_env, wrong)
    backend = from_config("rehearsal", device.backend_config())
    with pytest.raises(DeviceAuthError) as caught:
        asyncio.run(_start_and_close(backend, bell(10, seed=1), key(1)))
    text = str(caught.value) + repr(caught.value) + repr(caught.value.args)
    assert f"the token in environment variable {device.token_env} is missing or wrong" in text
    assert wrong not in text and device.token not in text
    monkeypatch.delenv(device.token_env)
    with pytest.raises(DeviceAuthError, match="is not set or empty"):
        asyncio.run(_start_and_close(backend, bell(10, seed=1), key(1)))


def test_lost_submit_answer_retried_with_the_same_key_creates_no_second_job(
    loopback: StartDevice,
) -> None:
    device = loopback(queue_delay=0.1)
    backend = from_config("rehearsal", device.backend_config(**NO_IN_CALL_RETRY))
    device.force("lost", method="POST", path="/v1/jobs")

    async def scenario() -> Polled:
        try:
            with pytest.raises(TransientBackendError, match="may have been accepted"):
                await backend.start(bell(100, seed=3), client_key=key(7))
            assert device.stats()["jobs"] == 1  # the device DID create the job
            # the worker's retry (or a restarted worker) starts again with the job key
            return await drive(backend, bell(100, seed=3), key(7))
        finally:
            await backend.aclose()

    polled = asyncio.run(scenario())
    assert polled.state == "done" and polled.result is not None
    assert polled.result.metadata["device_job"] == "lb-0000001"
    stats = device.stats()
    assert stats["faults"] == {"lost": 1}
    assert (stats["jobs"], stats["executions"], stats["duplicates"]) == (1, 1, 0)
    assert stats["replays"] == 1


@pytest.mark.parametrize("kind", ["lost", "slow", "drop", "malformed", "500"])
def test_in_call_retries_ride_out_one_fault_on_submit(loopback: StartDevice, kind: str) -> None:
    device = loopback(queue_delay=0.1, slow_delay=1.0)
    backend = from_config("rehearsal", device.backend_config(**FAST_CLIENT))
    device.force(kind, method="POST", path="/v1/jobs")
    handle = asyncio.run(_start_and_close(backend, bell(10, seed=1), key(1)))
    assert handle == "lb-0000001"
    time.sleep(1.1 if kind == "slow" else 0)  # let the slow request finish on the device
    stats = device.stats()
    assert stats["faults"] == {kind: 1}
    assert stats["jobs"] == 1


@pytest.mark.parametrize("kind", ["drop", "malformed", "500", "slow"])
def test_each_fault_kind_is_a_transient_error(loopback: StartDevice, kind: str) -> None:
    device = loopback(slow_delay=1.0)
    backend = from_config("rehearsal", device.backend_config(**NO_IN_CALL_RETRY))
    device.force(kind, method="GET", path="/v1/calibration")
    with pytest.raises(TransientBackendError):
        asyncio.run(_start_and_close(backend, bell(10, seed=1), key(1)))


def test_cancel_reaches_the_device(loopback: StartDevice) -> None:
    device = loopback(queue_delay=30.0)
    backend = from_config("rehearsal", device.backend_config())

    async def scenario() -> Polled:
        try:
            handle = (await backend.start(bell(10, seed=1), client_key=key(1))).handle
            assert handle is not None
            first = await backend.poll(handle)
            assert first.state == "waiting" and first.poll_after is not None  # Retry-After
            await backend.cancel(handle)
            await backend.cancel(handle)  # cancelling twice is harmless
            return await backend.poll(handle)
        finally:
            await backend.aclose()

    polled = asyncio.run(scenario())
    assert polled.state == "cancelled"
    stats = device.stats()
    assert stats["cancels"] == 1 and stats["cancel_requests"] == 2
    assert stats["executions"] == 0 and stats["states"] == {"cancelled": 1}


def test_cancel_after_the_end_leaves_the_job_done(loopback: StartDevice) -> None:
    device = loopback(queue_delay=0.05)
    backend = from_config("rehearsal", device.backend_config())

    async def scenario() -> Polled:
        try:
            polled = await drive(backend, bell(10, seed=1), key(1))
            await backend.cancel(polled.result.metadata["device_job"] if polled.result else "")
            return await backend.poll("lb-0000001")
        finally:
            await backend.aclose()

    assert asyncio.run(scenario()).state == "done"


def test_retry_after_travels_with_the_transient_error(loopback: StartDevice) -> None:
    # RFC 9110 §10.2.3: 429 carries delay-seconds, 503 an HTTP-date (the device's forms)
    device = loopback(retry_after=30)
    backend = from_config("rehearsal", device.backend_config(**FAST_CLIENT))
    device.force("429", method="POST", path="/v1/jobs")
    with pytest.raises(TransientBackendError) as caught:
        asyncio.run(_start_and_close(backend, bell(10, seed=1), key(1)))
    assert caught.value.retry_after == 30.0
    device.force("503", method="POST", path="/v1/jobs")
    with pytest.raises(TransientBackendError) as caught:
        asyncio.run(_start_and_close(backend, bell(10, seed=1), key(1)))
    assert caught.value.retry_after is not None and 28.0 <= caught.value.retry_after <= 30.0
    stats = device.stats()
    # too long to wait inside the call: one request each, straight back to the queue
    assert stats["faults"] == {"429": 1, "503": 1} and stats["submits"] == 0


def test_short_retry_after_is_waited_out_inside_the_call(loopback: StartDevice) -> None:
    device = loopback(retry_after=1)
    backend = from_config("rehearsal", device.backend_config(**FAST_CLIENT))
    device.force("429", method="POST", path="/v1/jobs")
    started = time.monotonic()
    handle = asyncio.run(_start_and_close(backend, bell(10, seed=1), key(1)))
    assert handle == "lb-0000001"
    assert time.monotonic() - started >= 1.0  # the device asked for 1 s and got it
