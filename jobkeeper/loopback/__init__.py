"""The loopback device: a real HTTP device on this machine, for rehearsal and tests.

It speaks the ``loopback`` device profile (``jobkeeper/profiles/loopback.toml``), checks a
bearer token, runs jobs on jobkeeper's state-vector simulator after a queue delay,
deduplicates submissions by their ``Idempotency-Key``, can inject faults at a seeded
rate, and counts what it did at ``GET /stats``. It listens on loopback addresses only.

- :func:`serve` runs it in the foreground (``jobkeeper loopback-device``);
- :func:`create_app` gives the ASGI application;
- :mod:`jobkeeper.loopback.testing` runs it in a background thread for tests.
"""

from __future__ import annotations

from jobkeeper.loopback._app import (
    ALL_FAULTS,
    KNOWN_FAULTS,
    PRESETS,
    DeviceSettings,
    FaultPlan,
    LoopbackApp,
    create_app,
)
from jobkeeper.loopback._device import DeviceJob, LoopbackDevice, Rejection
from jobkeeper.loopback._server import BackgroundDevice, loopback_address, serve

__all__ = [
    "ALL_FAULTS",
    "KNOWN_FAULTS",
    "PRESETS",
    "BackgroundDevice",
    "DeviceJob",
    "DeviceSettings",
    "FaultPlan",
    "LoopbackApp",
    "LoopbackDevice",
    "Rejection",
    "create_app",
    "loopback_address",
    "serve",
]
