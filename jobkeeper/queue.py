"""The job state machine: its states (:class:`JobState`) and the moves between them
(:data:`TRANSITIONS`), owned here and used by the stores, the worker and every reader;
and its policies: leases, heartbeats, retries and back-off.

States (DESIGN §3)::

    queued ──claim──▶ running ──start (remote)──▶ waiting ──claim (poll due)──▶ running
      ▲                 │  │                         ▲                             │
      └── transient ────┘  └──▶ done | failed | cancelled   └── still waiting ─────┘

``running`` means a worker holds the lease; ``waiting`` means a device accepted the job and
we poll it: a row with a next-poll time, not a held worker slot. A transient failure goes
back to ``queued`` (``waiting`` when a remote handle was recorded) with ``not_before`` set
by full-jitter exponential back-off; a delay the backend asks for wins. Polls that find the
job still waiting use no attempt. The transactions themselves live in the store.
"""

from __future__ import annotations

import random
from collections.abc import Mapping
from enum import StrEnum

from pydantic import BaseModel, ConfigDict, Field

__all__ = [
    "DEFAULT_LEASE",
    "DEFAULT_POLL",
    "DEFAULT_RETRY",
    "KEYED_STATES",
    "LIVE_STATES",
    "TERMINAL_STATES",
    "TRANSITIONS",
    "JobState",
    "LeasePolicy",
    "PollPolicy",
    "RetryPolicy",
]


class JobState(StrEnum):
    """Where a job is. The values are what the archive stores and every reader prints."""

    QUEUED = "queued"
    RUNNING = "running"
    WAITING = "waiting"
    DONE = "done"
    FAILED = "failed"
    CANCELLED = "cancelled"

    @property
    def terminal(self) -> bool:
        """Nothing moves a job out of this state (nothing is ever deleted either)."""
        return not TRANSITIONS[self]

    def can_move_to(self, other: JobState) -> bool:
        return other in TRANSITIONS[self]


#: Every move a store may make, and what makes it. A job is claimed from ``queued`` (to
#: start) or ``waiting`` (to poll); only a worker holding the lease moves it on.
TRANSITIONS: Mapping[JobState, frozenset[JobState]] = {
    # claim; cancel before any worker took it
    JobState.QUEUED: frozenset({JobState.RUNNING, JobState.CANCELLED}),
    # device accepted it or still working (waiting); transient failure, shutdown or an
    # expired lease (queued, or waiting when a handle is recorded); finished; gave up;
    # cancelled on request
    JobState.RUNNING: frozenset(
        {JobState.WAITING, JobState.QUEUED, JobState.DONE, JobState.FAILED, JobState.CANCELLED}
    ),
    # a poll is due (a cancel request also makes it due: the worker tells the device)
    JobState.WAITING: frozenset({JobState.RUNNING}),
    JobState.DONE: frozenset(),
    JobState.FAILED: frozenset(),
    JobState.CANCELLED: frozenset(),
}

#: Jobs still to be finished: the worker has work while any is left.
LIVE_STATES = frozenset({JobState.QUEUED, JobState.RUNNING, JobState.WAITING})
TERMINAL_STATES = frozenset(state for state in JobState if state.terminal)
#: States in which a job key is taken: a second submission joins or reuses that job; a
#: failed or cancelled job leaves its key free for a new try.
KEYED_STATES = LIVE_STATES | {JobState.DONE}

#: A server's Retry-After beyond this is clamped (and the clamp is recorded).
MAX_BACKEND_DELAY = 3600.0


class RetryPolicy(BaseModel):
    """Full-jitter exponential back-off: delay = uniform(0, min(cap, base · 2^attempt)).
    How many attempts a job gets is fixed when it is submitted (``[defaults] max_attempts``)."""

    model_config = ConfigDict(frozen=True, extra="forbid", allow_inf_nan=False)

    base: float = Field(default=2.0, gt=0)
    cap: float = Field(default=900.0, gt=0)

    def delay(
        self, attempt: int, *, backend_hint: float | None = None, rng: random.Random | None = None
    ) -> float:
        """Seconds to wait before attempt ``attempt + 1`` (``attempt`` counts from 1)."""
        draw = (rng or random).uniform(0.0, min(self.cap, self.base * 2.0 ** max(attempt - 1, 0)))
        if backend_hint is not None and backend_hint > 0:
            # The device knows its own load: its hint wins over our guess.
            return min(max(backend_hint, 0.0), MAX_BACKEND_DELAY)
        return draw


class LeasePolicy(BaseModel):
    """Heartbeat 10 s, lease 60 s, expiry check 15 s: a dead worker's jobs are back in the
    queue within about heartbeat + lease + expiry check ≈ 85 s, and a live one never loses
    its lease. ``expiry_check`` is how often a worker looks for expired leases."""

    model_config = ConfigDict(frozen=True, allow_inf_nan=False)

    lease: float = Field(default=60.0, gt=0)
    heartbeat: float = Field(default=10.0, gt=0)
    expiry_check: float = Field(default=15.0, gt=0)


class PollPolicy(BaseModel):
    """Adaptive polling of waiting jobs: start at ``first`` seconds, grow by ``factor``
    each time the job is still waiting, up to ``cap``; a device's own hint wins."""

    model_config = ConfigDict(frozen=True, extra="forbid", allow_inf_nan=False)

    first: float = Field(default=2.0, gt=0)
    factor: float = Field(default=1.5, ge=1.0)
    cap: float = Field(default=60.0, gt=0)

    def next_delay(self, polls_so_far: int, *, hint: float | None = None) -> float:
        if hint is not None and hint >= 0:
            return min(hint, MAX_BACKEND_DELAY)
        return min(self.cap, self.first * self.factor**polls_so_far)

    def polls_after(self, waited: float) -> int:
        """Polls so far of a job that has waited ``waited`` seconds: estimated from that
        time, so no extra column is needed and a restarted worker continues the same
        back-off."""
        count, total = 0, 0.0
        while total < waited and count < 64:
            total += self.next_delay(count)
            count += 1
        return count


DEFAULT_RETRY = RetryPolicy()
DEFAULT_LEASE = LeasePolicy()
DEFAULT_POLL = PollPolicy()
