"""The loopback device's state: its jobs, its idempotency keys and what it counts.

No HTTP here (see ``_app.py``). Jobs are small records: the circuit text is kept until
the job runs, then replaced by its outcome. They are written through to SQLite
(``_state.py``): in a file given at start, a restarted device still knows them. A job
runs once its queue delay has passed and someone looks at it (a status, result or stats request): the device records the
execution then, and computes the counts when they are first asked for (seeded, so the
moment of computing does not change them).
"""

from __future__ import annotations

import asyncio
import hashlib
import json
import random
import time
from collections import Counter
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from datetime import UTC, datetime
from typing import Any

from jobkeeper.loopback._state import DeviceState

#: what a job's outcome is: ("counts", {...}) or ("probabilities", {...}).
Outcome = tuple[str, dict[str, Any]]
#: runs (circuit text, shots, seed, exact) → outcome; raises ValueError to fail the job.
Simulator = Callable[[str, int, int, bool], Outcome]
#: parses circuit text → (number of qubits, names of opaque gates the circuit applies);
#: raises ValueError with a message for invalid text.
Checker = Callable[[str], tuple[int, frozenset[str]]]

MAX_SEED = 2**63 - 1


class Rejection(Exception):
    """The device refuses a request: HTTP ``status`` with a ``message`` for the client."""

    def __init__(self, status: int, code: str, message: str) -> None:
        super().__init__(message)
        self.status = status
        self.code = code
        self.message = message


@dataclass(slots=True)
class DeviceJob:
    id: str
    key: str
    fingerprint: bytes
    program: str | None
    shots: int
    seed: int
    exact: bool
    submitted_at: float
    running_at: float
    ready_at: float
    state: str = "queued"
    message: str = ""
    refusal: str | None = None
    outcome: Outcome | None = None
    executed_at: float | None = None
    #: what a preset of the device keeps about the job beyond the common fields
    extra: dict[str, Any] = field(default_factory=dict)

    def public(self) -> dict[str, Any]:
        return {
            "id": self.id,
            "state": self.state,
            "message": self.message,
            "shots": self.shots,
            "seed": self.seed,
            "exact": self.exact,
            "submitted_at": _iso(self.submitted_at),
            "executed_at": _iso(self.executed_at) if self.executed_at is not None else None,
        }


def _iso(timestamp: float) -> str:
    return datetime.fromtimestamp(timestamp, UTC).isoformat(timespec="milliseconds")


def _fingerprint(body: dict[str, Any]) -> bytes:
    return hashlib.sha256(json.dumps(body, sort_keys=True).encode()).digest()[:16]


class LoopbackDevice:
    """Jobs, keys and counters of one loopback device.

    ``queue_delay`` seconds pass between acceptance and completion (the second half of it
    the job is ``running``). Keys are kept as long as the jobs, up to ``max_jobs`` jobs;
    beyond that the device answers 503 (its published expiry policy, as the
    idempotency-key draft asks for: none). ``state`` keeps the jobs (in memory unless it
    was opened on a file: then they outlive the process). Times are wall-clock seconds,
    so that they mean the same after a restart.
    """

    def __init__(
        self,
        *,
        queue_delay: float = 1.0,
        seed: int = 0,
        max_qubits: int = 20,
        max_shots: int = 1_000_000,
        max_jobs: int = 100_000,
        simulate: Simulator,
        check: Checker,
        clock: Callable[[], float] = time.time,
        state: DeviceState | None = None,
    ) -> None:
        self.queue_delay = queue_delay
        self.max_qubits = max_qubits
        self.max_shots = max_shots
        self.max_jobs = max_jobs
        self._simulate = simulate
        self._check = check
        self._clock = clock
        self._rng = random.Random(seed)
        self.state = state if state is not None else DeviceState()
        self._jobs: dict[str, DeviceJob] = {}
        self._by_key: dict[str, str] = {}
        self._running: dict[str, asyncio.Future[None]] = {}
        self.counters: Counter[str] = Counter()
        self.faults: Counter[str] = Counter()
        self._executions_by_key: Counter[str] = Counter()
        self._executions_by_payload: Counter[bytes] = Counter()
        self.calibration = _invented_calibration(seed, max_qubits)
        for fields in self.state.rows():
            job = DeviceJob(**fields)
            self._jobs[job.id] = job
            self._by_key[job.key] = job.id
            if job.executed_at is not None:
                self._count_execution(job)

    def _save(self, job: DeviceJob) -> None:
        self.state.save(asdict(job))

    def _count_execution(self, job: DeviceJob) -> None:
        self.counters["executions"] += 1
        self._executions_by_key[job.key] += 1
        self._executions_by_payload[job.fingerprint] += 1

    # ------------------------------------------------------------------ submit

    def submit(self, key: str | None, body: Any) -> tuple[bool, DeviceJob]:
        """(created, job): a new job, or the one already made with ``key``."""
        self.counters["submits"] += 1
        if not key:
            raise Rejection(
                400, "idempotency-key-missing", "the Idempotency-Key header is required"
            )
        if not isinstance(body, dict):
            raise Rejection(400, "bad-request", "the body must be a JSON object")
        fingerprint = _fingerprint(body)
        known = self._by_key.get(key)
        if known is not None:
            job = self._jobs[known]
            if job.fingerprint != fingerprint:
                raise Rejection(
                    422,
                    "idempotency-key-reused",
                    "this Idempotency-Key was used for a different request",
                )
            self.counters["replays"] += 1
            return False, job
        program, shots, seed, exact = self._validate(body)
        if len(self._jobs) >= self.max_jobs:
            raise Rejection(503, "queue-full", f"the device holds {self.max_jobs} jobs; it is full")
        try:
            num_qubits, opaque = self._check(program)
        except ValueError as exc:
            self.counters["rejected"] += 1
            raise Rejection(400, "invalid-program", f"invalid program: {exc}") from None
        if num_qubits > self.max_qubits:
            self.counters["rejected"] += 1
            raise Rejection(
                400,
                "too-many-qubits",
                f"the program uses {num_qubits} qubits; at most {self.max_qubits}",
            )
        if seed is None:
            seed = self._rng.randrange(2**32)
        now = self._clock()
        job = DeviceJob(
            id=f"lb-{len(self._jobs) + 1:07d}",
            key=key,
            fingerprint=fingerprint,
            program=program,
            shots=shots,
            seed=seed,
            exact=exact,
            submitted_at=now,
            running_at=now + self.queue_delay / 2,
            ready_at=now + self.queue_delay,
            refusal=f"opaque gate {sorted(opaque)[0]!r} cannot run on this device"
            if opaque
            else None,
        )
        self._save(job)
        self._jobs[job.id] = job
        self._by_key[key] = job.id
        return True, job

    def _validate(self, body: dict[str, Any]) -> tuple[str, int, int | None, bool]:
        program, shots, seed, exact = (body.get(k) for k in ("program", "shots", "seed", "exact"))
        problem = None
        if not isinstance(program, str) or not program.strip():
            problem = "program must be the circuit's OpenQASM 2.0 text"
        elif isinstance(shots, bool) or not isinstance(shots, int):
            problem = "shots must be an integer"
        elif shots <= 0 and not exact:
            problem = f"shots must be positive, not {shots}"
        elif shots > self.max_shots:
            problem = f"shots must be at most {self.max_shots}, not {shots}"
        elif seed is not None and (isinstance(seed, bool) or not isinstance(seed, int)):
            problem = "seed must be an integer or null"
        elif seed is not None and not 0 <= seed <= MAX_SEED:
            problem = f"seed must be between 0 and {MAX_SEED}"
        elif exact is not None and not isinstance(exact, bool):
            problem = "exact must be true or false"
        if problem is not None:
            self.counters["rejected"] += 1
            raise Rejection(400, "bad-request", problem)
        assert isinstance(program, str) and isinstance(shots, int)
        return program, shots, seed, bool(exact)

    # ------------------------------------------------------------------ lifecycle

    def _advance(self, job: DeviceJob) -> DeviceJob:
        if job.state not in ("queued", "running"):
            return job
        now = self._clock()
        if now >= job.ready_at:
            if job.refusal is not None:
                job.state, job.message, job.program = "error", job.refusal, None
            else:
                job.state = "complete"
                # the execution's record: when (wall clock, back-dated to the moment the
                # queue delay ended) and the per-key and per-body tallies
                job.executed_at = job.ready_at
                self._count_execution(job)
            self._save(job)
        elif now >= job.running_at and job.state != "running":
            job.state = "running"
            self._save(job)
        return job

    def note(self, job: DeviceJob, **extra: Any) -> None:
        """Keep ``extra`` about ``job`` beside its common fields (what a preset records)."""
        job.extra.update(extra)
        self._save(job)

    def job(self, job_id: str) -> DeviceJob:
        job = self._jobs.get(job_id)
        if job is None:
            raise Rejection(404, "no-such-job", f"no job {job_id!r}")
        return self._advance(job)

    def jobs(self) -> list[DeviceJob]:
        """Every job the device holds, in the order it accepted them."""
        return list(self._jobs.values())

    def seconds_left(self, job: DeviceJob) -> float:
        return max(0.0, job.ready_at - self._clock())

    def cancel(self, job_id: str) -> DeviceJob:
        job = self.job(job_id)
        self.counters["cancel_requests"] += 1
        if job.state in ("queued", "running"):
            job.state, job.message, job.program = "cancelled", "cancelled by request", None
            self._save(job)
            self.counters["cancels"] += 1
        elif job.state != "cancelled":
            raise Rejection(409, "already-ended", f"job {job_id} already ended {job.state!r}")
        return job

    async def result(self, job_id: str, run: Callable[[Callable[[], Outcome]], Any]) -> Outcome:
        """The job's outcome, computing it on first request (``run`` moves the work off
        the event loop: ``await run(fn)`` returns ``fn()``)."""
        job = self.job(job_id)
        if job.state != "complete":
            raise Rejection(409, "no-result", f"job {job_id} is {job.state}: no result")
        pending = self._running.get(job_id)
        if pending is not None:  # another request is computing it: wait for that one
            await asyncio.shield(pending)
        elif job.outcome is None:
            program = job.program
            assert program is not None
            done: asyncio.Future[None] = asyncio.get_running_loop().create_future()
            self._running[job_id] = done
            try:
                job.outcome = await run(
                    lambda: self._simulate(program, job.shots, job.seed, job.exact)
                )
            except ValueError as exc:
                job.state, job.message = "error", f"run failed: {exc}"
            finally:
                job.program = None
                self._save(job)
                done.set_result(None)
                del self._running[job_id]
        if job.outcome is None:
            raise Rejection(409, "run-failed", job.message or "the run failed")
        return job.outcome

    # ------------------------------------------------------------------ stats

    def stats(self) -> dict[str, Any]:
        """Counters; ``duplicates`` = executions beyond one per idempotency key, and
        ``payload_duplicates`` = beyond one per distinct request body (a client that sent
        a new key on a retry would show here). Both must stay 0."""
        states: Counter[str] = Counter(self._advance(job).state for job in self._jobs.values())
        return {
            "executions": self.counters["executions"],
            "duplicates": sum(n - 1 for n in self._executions_by_key.values() if n > 1),
            "payload_duplicates": sum(n - 1 for n in self._executions_by_payload.values() if n > 1),
            "submits": self.counters["submits"],
            "replays": self.counters["replays"],
            "rejected": self.counters["rejected"],
            "cancel_requests": self.counters["cancel_requests"],
            "cancels": self.counters["cancels"],
            "requests": self.counters["requests"],
            "faults": dict(sorted(self.faults.items())),
            "jobs": len(self._jobs),
            "states": dict(sorted(states.items())),
        }


def _invented_calibration(seed: int, qubits: int) -> dict[str, Any]:
    """Invented calibration numbers (the device simulates an ideal circuit and uses none
    of them); they exist so that calibration snapshots can be rehearsed end to end, down
    to a noisy stand-in simulator built from them (``noise_from``; the fields and their
    mapping: jobkeeper.backends.sim.calibration)."""
    rng = random.Random(f"calibration-{seed}")
    return {
        "invented": True,
        "note": "invented numbers for rehearsal; the loopback device is an ideal simulator",
        "qubits": qubits,
        "t1_us": [round(rng.uniform(60, 160), 1) for _ in range(qubits)],
        "t2_us": [round(rng.uniform(30, 120), 1) for _ in range(qubits)],
        "readout_error": [round(rng.uniform(0.005, 0.03), 4) for _ in range(qubits)],
        "single_qubit_gate_error": round(rng.uniform(1e-4, 5e-4), 6),
        "two_qubit_gate_error": round(rng.uniform(5e-3, 2e-2), 5),
        "gate_time_1q_ns": round(rng.uniform(30, 80)),
        "gate_time_2q_ns": round(rng.uniform(200, 500)),
        "readout_time_ns": round(rng.uniform(500, 1500)),
    }
