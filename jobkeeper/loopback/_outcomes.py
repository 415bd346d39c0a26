"""What the loopback device's presets share about a finished run's outcomes: its counts,
each outcome read as classical bits with c[0] first, and the per-shot record (every shot
once, in a seeded order of its own) from which the presets write samples in their own
encodings."""

from __future__ import annotations

import random
from collections.abc import Callable
from typing import TypeVar

from starlette.concurrency import run_in_threadpool

from jobkeeper.counts import plain_key
from jobkeeper.loopback._device import DeviceJob, LoopbackDevice, Rejection

T = TypeVar("T")


def c0_first(key: str) -> list[int]:
    """The classical bits of a count key, c[0] first."""
    return [int(b) for b in reversed(plain_key(key))]


def value_of(bits: list[int]) -> int:
    """The outcome as an integer whose bit k is c[k]."""
    return sum(b << k for k, b in enumerate(bits))


async def run_counts(device: LoopbackDevice, job_id: str) -> tuple[DeviceJob, dict[str, int]]:
    """The finished job and its counts (409 for an exact run: it has no outcomes)."""
    kind, values = await device.result(job_id, run_in_threadpool)
    if kind != "counts":
        raise Rejection(409, "no-outcomes", "exact runs have no sampled outcomes")
    return device.job(job_id), dict(values)


async def shot_record(
    device: LoopbackDevice, job_id: str, write: Callable[[list[int]], T]
) -> list[T]:
    """Every shot of the job once, each written by ``write`` from its bits (c[0] first),
    in an order shuffled by the job's seed: a device's per-shot record."""
    job, counts = await run_counts(device, job_id)
    shots = [write(c0_first(key)) for key, n in sorted(counts.items()) for _ in range(n)]
    random.Random(job.seed).shuffle(shots)
    return shots
