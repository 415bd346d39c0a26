"""The one interface between jobkeeper and anything that runs circuits.

A backend describes itself with :class:`BackendInfo` and runs a :class:`Task`:
``start`` (idempotent on the client key), ``poll``, ``cancel``. Local simulators
finish inside ``start`` and return the result at once; remote devices return a handle
that the worker stores before anything else happens, and the worker polls it later.

Errors: :class:`~jobkeeper.exceptions.TransientBackendError` (retry later, maybe after
``retry_after`` seconds) or :class:`~jobkeeper.exceptions.PermanentBackendError` (fail
now, the message says why). Nothing else may escape a backend method.

Tries inside one call: a backend that retries within ``start``, ``poll`` or ``cancel``
(quick retries of a flaky connection, say) calls :func:`report_try` with the error of
each try it is about to retry. The worker records each as an attempt of the job, so no
try against a device goes unrecorded; outside a worker the call does nothing.

This is a :class:`typing.Protocol`: third-party backends need not inherit from anything.
They register a factory under the entry-point group ``jobkeeper.backends``; the factory
is called as ``factory(name=..., config={...})`` and returns a backend.
"""

from __future__ import annotations

import time
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Literal, Protocol, runtime_checkable

from jobkeeper.circuit.ir import Circuit

if TYPE_CHECKING:
    from jobkeeper.circuit.qasm3.template import Template

BackendKind = Literal["simulator", "remote"]
RemoteState = Literal["waiting", "done", "failed", "cancelled"]


@dataclass(frozen=True)
class Pricing:
    """What a run costs: a fixed amount per task plus an amount per shot."""

    currency: str = "credits"
    per_task: float = 0.0
    per_shot: float = 0.0

    def cost(self, shots: int) -> float:
        return self.per_task + self.per_shot * shots


@dataclass(frozen=True)
class BackendInfo:
    """What a backend is and what it can run.

    ``deterministic`` is true when the same task with the same seed always gives the same
    counts (reruns are then checked for identity rather than statistical consistency).
    ``native_operations`` is None when any standard gate is accepted.
    ``config_hash`` is ``sha256:<hex>`` of the backend's configuration (it enters job keys:
    a change of configuration is a different job). ``calibration`` is a JSON-ready
    snapshot, recorded in manifests.
    """

    name: str
    kind: BackendKind
    version: str
    max_qubits: int
    max_shots: int = 10_000_000
    native_operations: frozenset[str] | None = None
    mid_circuit_measurement: bool = True
    deterministic: bool = True
    pricing: Pricing | None = None
    calibration: Mapping[str, Any] | None = None
    config_hash: str = ""
    description: str = ""


@dataclass(frozen=True)
class Task:
    """What to run: a circuit, the shots, the seed (None lets the backend choose), and
    backend-specific options. ``exact`` asks for exact probabilities instead of counts
    where the backend can give them."""

    circuit: Circuit
    shots: int
    seed: int | None = None
    exact: bool = False
    options: Mapping[str, Any] = field(default_factory=dict)
    #: canonical OpenQASM 2.0 text of ``circuit`` (what a remote device is sent).
    circuit_text: str = ""


@dataclass(frozen=True)
class Result:
    """Counts (bit string → number of shots) or, for exact runs, probabilities."""

    counts: Mapping[str, int] | None = None
    probabilities: Mapping[str, float] | None = None
    metadata: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class Started:
    """What ``start`` gives back: a finished ``result``, or a remote ``handle`` to poll
    (optionally no sooner than ``poll_after`` seconds)."""

    handle: str | None = None
    result: Result | None = None
    poll_after: float | None = None


@dataclass(frozen=True)
class Polled:
    """What ``poll`` gives back. ``state`` is ``waiting`` (poll again, no sooner than
    ``poll_after`` seconds if given), ``done`` (with ``result``), ``failed`` (with
    ``message``) or ``cancelled``."""

    state: RemoteState
    result: Result | None = None
    message: str = ""
    poll_after: float | None = None


@runtime_checkable
class Backend(Protocol):
    """Anything that runs circuits.

    ``start`` must be idempotent on ``client_key``: called twice with the same key (after
    a crash, or a lost response) it must not run the task twice. It is safe to retry.
    ``poll`` and ``cancel`` are safe to retry. All three raise only
    ``TransientBackendError`` or ``PermanentBackendError``.
    """

    @property
    def info(self) -> BackendInfo: ...

    async def start(self, task: Task, *, client_key: str) -> Started: ...

    async def poll(self, handle: str) -> Polled: ...

    async def cancel(self, handle: str) -> None: ...

    async def aclose(self) -> None: ...


@runtime_checkable
class LocalBackend(Backend, Protocol):
    """A backend that computes on this machine. The worker calls ``execute`` in a worker
    process (so the backend object must be picklable) instead of ``start``.

    A backend may also set ``inline_qubits`` (an int): circuits up to that many qubits
    (and at most a few hundred operations) finish in well under a millisecond, so the
    worker runs them on its own thread rather than paying a hand-off. Without it, nothing
    runs inline."""

    def execute(self, task: Task) -> Result: ...


@dataclass(frozen=True, slots=True)
class BatchPoint:
    """One point of a batch: the values of the template's inputs, the shots, the seed
    (resolved, as a job's; None lets the backend choose) and the exact flag. With
    ``circuit_hash`` (the point's job's circuit hash) the backend refuses a point whose
    bound circuit is another."""

    values: Mapping[str, float]
    shots: int
    seed: int | None
    exact: bool = False
    circuit_hash: str | None = None


@runtime_checkable
class BatchBackend(LocalBackend, Protocol):
    """A local backend that runs many points of one template at once (DESIGN §7).

    ``run_batch`` returns one Result per point, in the points' order, each exactly what
    running that point's bound circuit alone would give for its seed: a point's result
    never depends on the batch it ran in or its place there. It raises only
    ``PermanentBackendError`` (naming the point where one is to blame); the caller may
    then run the points one at a time to find which fail."""

    def run_batch(self, template: Template, points: Sequence[BatchPoint]) -> list[Result]: ...


@dataclass(frozen=True)
class Try:
    """A try a backend retried inside one call: the error's class and message, and when it
    failed (``time.monotonic()``)."""

    error_class: str
    message: str
    at: float


# The tries of the call in progress, per asyncio task (each job is handled in its own task,
# so concurrent jobs never see each other's tries).
_tries: ContextVar[list[Try] | None] = ContextVar("jobkeeper_tries", default=None)


def report_try(error: BaseException) -> None:
    """Tell whoever runs this backend call that one try failed with ``error`` and will be
    retried within the call. Safe to call anywhere: without a collector it does nothing."""
    sink = _tries.get()
    if sink is not None:
        sink.append(Try(type(error).__name__, str(error), time.monotonic()))


@contextmanager
def collect_tries(sink: list[Try]) -> Iterator[list[Try]]:
    """Collect, into ``sink``, the tries backends report inside this block (in this task)."""
    token = _tries.set(sink)
    try:
        yield sink
    finally:
        _tries.reset(token)
