"""The loopback device's bookkeeping, without HTTP: a fake clock and a fake simulator."""

from __future__ import annotations

import asyncio
import tracemalloc
from collections.abc import Callable
from typing import Any

import pytest

from jobkeeper.exceptions import ConfigError
from jobkeeper.loopback import FaultPlan, LoopbackDevice, Rejection, create_app, loopback_address
from jobkeeper.loopback._device import Outcome


class Clock:
    def __init__(self) -> None:
        self.now = 100.0

    def __call__(self) -> float:
        return self.now


class FakeSimulator:
    def __init__(self) -> None:
        self.runs = 0

    def __call__(self, text: str, shots: int, seed: int, exact: bool) -> Outcome:
        self.runs += 1
        return "counts", {"00": shots}


def check(text: str) -> tuple[int, frozenset[str]]:
    if "bad" in text:
        raise ValueError("line 1: expected 'OPENQASM'")
    return (25 if "wide" in text else 2), frozenset({"magic"} if "magic" in text else ())


def make(clock: Clock, simulator: FakeSimulator | None = None, **kw: Any) -> LoopbackDevice:
    return LoopbackDevice(
        queue_delay=1.0, simulate=simulator or FakeSimulator(), check=check, clock=clock, **kw
    )


def body(**changes: Any) -> dict[str, Any]:
    return {"program": "ok", "shots": 10, "seed": 1, "exact": False, "tag": "k", **changes}


async def inline(fn: Callable[[], Outcome]) -> Outcome:
    return fn()


def test_same_key_gives_the_same_job_and_runs_once() -> None:
    clock, simulator = Clock(), FakeSimulator()
    device = make(clock, simulator)
    created, job = device.submit("key-1", body())
    again, same = device.submit("key-1", body())
    assert created and not again and same is job
    clock.now += 0.6
    assert device.job(job.id).state == "running"
    clock.now += 0.5
    assert device.job(job.id).state == "complete"
    for _ in range(3):
        assert asyncio.run(device.result(job.id, inline)) == ("counts", {"00": 10})
    assert simulator.runs == 1  # computed once, then cached
    assert job.program is None  # the circuit text is dropped once it has run
    assert job.executed_at is not None
    stats = device.stats()
    assert stats["executions"] == 1 and stats["duplicates"] == 0
    assert stats["submits"] == 2 and stats["replays"] == 1 and stats["jobs"] == 1


def test_key_reused_with_another_body_is_422() -> None:
    # IETF draft-ietf-httpapi-idempotency-key-header: a key reused with a different
    # payload gets 422; a missing key where one is required gets 400.
    device = make(Clock())
    device.submit("key-1", body())
    with pytest.raises(Rejection) as caught:
        device.submit("key-1", body(shots=11))
    assert caught.value.status == 422
    with pytest.raises(Rejection) as caught:
        device.submit(None, body())
    assert caught.value.status == 400 and "Idempotency-Key" in caught.value.message


@pytest.mark.parametrize(
    ("changes", "message"),
    [
        ({"shots": 0}, "shots must be positive, not 0"),
        ({"shots": -3}, "shots must be positive, not -3"),
        ({"shots": "10"}, "shots must be an integer"),
        ({"shots": True}, "shots must be an integer"),
        ({"seed": -1}, "seed must be between 0 and"),
        ({"program": ""}, "program must be the circuit's OpenQASM 2.0 text"),
        ({"program": "bad"}, "invalid program: line 1: expected 'OPENQASM'"),
        ({"program": "wide"}, "the program uses 25 qubits; at most 20"),
        ({"exact": "yes"}, "exact must be true or false"),
    ],
)
def test_invalid_submissions_are_400_with_a_message(changes: dict[str, Any], message: str) -> None:
    device = make(Clock())
    with pytest.raises(Rejection) as caught:
        device.submit("key", body(**changes))
    assert caught.value.status == 400
    assert message in caught.value.message
    assert device.stats()["jobs"] == 0
    # a rejected key is not remembered: the corrected request is accepted
    assert device.submit("key", body())[0]


def test_opaque_gate_fails_at_run_time() -> None:
    clock = Clock()
    device = make(clock)
    _, job = device.submit("k", body(program="magic"))
    clock.now += 2
    assert device.job(job.id).state == "error"
    assert "opaque gate 'magic'" in job.message
    assert device.stats()["executions"] == 0


def test_cancel() -> None:
    clock = Clock()
    device = make(clock)
    _, job = device.submit("k1", body())
    assert device.cancel(job.id).state == "cancelled"
    assert device.cancel(job.id).state == "cancelled"  # idempotent
    clock.now += 2
    assert device.job(job.id).state == "cancelled"  # a cancelled job never runs
    _, done = device.submit("k2", body(seed=2))
    clock.now += 2
    with pytest.raises(Rejection) as caught:
        device.cancel(done.id)
    assert caught.value.status == 409
    stats = device.stats()
    assert stats["cancels"] == 1 and stats["executions"] == 1
    with pytest.raises(Rejection) as caught:
        device.cancel("lb-nope")
    assert caught.value.status == 404


def test_result_before_completion_is_409() -> None:
    device = make(Clock())
    _, job = device.submit("k", body())
    with pytest.raises(Rejection) as caught:
        asyncio.run(device.result(job.id, inline))
    assert caught.value.status == 409


def test_seed_chosen_by_the_device_is_reproducible() -> None:
    one = make(Clock(), seed=3).submit("k", body(seed=None))[1].seed
    two = make(Clock(), seed=3).submit("k", body(seed=None))[1].seed
    assert one == two


def test_a_full_device_says_503() -> None:
    device = make(Clock(), max_jobs=2)
    device.submit("a", body(seed=1))
    device.submit("b", body(seed=2))
    with pytest.raises(Rejection) as caught:
        device.submit("c", body(seed=3))
    assert caught.value.status == 503


def test_memory_per_queued_job_is_small() -> None:
    # 2,000 queued jobs with a Bell-sized program: each record must stay small (the
    # text is kept until the job runs; nothing else grows with the circuit).
    program = 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c[2];\nh q[0];\n' * 2
    device = make(Clock())
    tracemalloc.start()
    try:
        before = tracemalloc.take_snapshot()
        for i in range(2000):
            device.submit(f"sha256:{i:064x}", body(program=program + f"// {i}\n", seed=i))
        after = tracemalloc.take_snapshot()
    finally:
        tracemalloc.stop()
    grown = sum(stat.size_diff for stat in after.compare_to(before, "filename"))
    assert device.stats()["jobs"] == 2000
    assert grown / 2000 < 2048, f"{grown / 2000:.0f} bytes per queued job"


def test_fault_plan_and_app_settings_are_checked() -> None:
    with pytest.raises(ValueError, match="unknown fault kinds"):
        FaultPlan(rate=0.1, kinds=("meteor",))
    with pytest.raises(ValueError, match="fault rate"):
        FaultPlan(rate=1.5)
    with pytest.raises(ValueError, match="non-empty token"):
        create_app(token="")


@pytest.mark.parametrize("host", ["127.0.0.1", "127.0.0.2", "::1", "localhost"])
def test_loopback_addresses_are_accepted(host: str) -> None:
    assert loopback_address(host) in (host, "127.0.0.1")


@pytest.mark.parametrize("host", ["0.0.0.0", "::", "192.168.1.10", "example.org", ""])
def test_other_addresses_are_refused(host: str) -> None:
    with pytest.raises(ConfigError, match="loopback addresses only"):
        loopback_address(host)


def test_a_device_reopened_on_its_state_file_knows_its_jobs_and_keys(tmp_path) -> None:
    from jobkeeper.loopback._state import DeviceState

    clock, path = Clock(), str(tmp_path / "device.sqlite")
    first = make(clock, state=DeviceState(path))
    _, job = first.submit("key-1", body())
    clock.now += 2
    outcome = asyncio.run(first.result(job.id, inline))
    first.state.close()
    second = make(clock, state=DeviceState(path))
    again, same = second.submit("key-1", body())
    assert not again and same.id == job.id and same.state == "complete"
    assert asyncio.run(second.result(job.id, inline)) == outcome
    assert second.stats()["executions"] == 1 and second.stats()["duplicates"] == 0
