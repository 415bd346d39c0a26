"""The loopback device for tests: a real HTTP server on 127.0.0.1 in a background thread.

Use it from a pytest fixture (this module does not import pytest)::

    from jobkeeper.loopback.testing import running_device

    @pytest.fixture
    def device():
        with running_device(queue_delay=0.05) as running:
            yield running   # running.url, .token, .stats(), .force("lost", method="POST")

and point a ``rest`` backend at it: ``running.backend_config()`` is the config table, with
the token in the environment variable ``running.token_env`` (set it with monkeypatch).
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Unpack

import httpx

from jobkeeper.loopback._app import DeviceSettings, LoopbackApp, create_app
from jobkeeper.loopback._device import LoopbackDevice
from jobkeeper.loopback._server import BackgroundDevice

TEST_TOKEN = "loopback-test-token-not-a-secret"
TEST_TOKEN_ENV = "JOBKEEPER_LOOPBACK_TEST_TOKEN"
#: the exchange preset's client id, and the variable tests put it in
CLIENT_ID = "loopback-client"
CLIENT_ID_ENV = "JOBKEEPER_LOOPBACK_TEST_CLIENT_ID"


@dataclass(frozen=True)
class RunningDevice:
    """A loopback device that is listening: where, with which token, and its counters."""

    url: str
    token: str
    token_env: str
    app: LoopbackApp

    @property
    def device(self) -> LoopbackDevice:
        return self.app.device

    def force(
        self, kind: str, *, method: str | None = None, path: str | None = None, times: int = 1
    ) -> None:
        """Inject a fault into the next matching request(s); see :meth:`LoopbackApp.force`."""
        self.app.force(kind, method=method, path=path, times=times)

    def stats(self) -> dict[str, Any]:
        """``GET /stats`` over HTTP (executions, duplicates, submits, faults, jobs, ...)."""
        response = httpx.get(f"{self.url}/stats", timeout=10.0, trust_env=False)
        response.raise_for_status()
        stats: dict[str, Any] = response.json()
        return stats

    def backend_config(self, **overrides: Any) -> dict[str, Any]:
        """A ``[backends.NAME]`` table for a ``rest`` backend speaking to this device (in
        the exchange and relay presets the secret is read from ``token_env`` and the client
        id from CLIENT_ID_ENV, set it to ``CLIENT_ID``)."""
        if self.app.preset in ("exchange", "relay"):
            auth = {"client_id_env": CLIENT_ID_ENV, "client_secret_env": self.token_env}
            return {"adapter": "rest", "profile": f"loopback-{self.app.preset}", "url": self.url,
                    **auth, **overrides}  # fmt: skip
        if self.app.preset == "ledger":
            return {"adapter": "rest", "profile": "loopback-ledger", "url": self.url,
                    "token_env": self.token_env, **overrides}  # fmt: skip
        return {
            "adapter": "rest",
            "profile": "loopback",
            "url": self.url,
            "token_env": self.token_env,
            **overrides,
        }


@contextmanager
def running_device(
    *,
    token: str = TEST_TOKEN,
    token_env: str = TEST_TOKEN_ENV,
    port: int = 0,
    startup_timeout: float = 10.0,
    **settings: Unpack[DeviceSettings],
) -> Iterator[RunningDevice]:
    """Start a loopback device on 127.0.0.1 and a free port; stop it on exit. ``settings``
    are those of :func:`~jobkeeper.loopback.create_app`, with defaults that suit tests:
    a short queue delay (0.05 s), slow faults of 1 s (set the client's read timeout below
    that). ``state`` (a setting): the SQLite file that keeps the device's jobs (give
    the same file and ``port`` to rehearse a restart); ``preset = "exchange"`` speaks the
    ``loopback-exchange`` profile (``token`` is then the client secret; tokens live
    ``token_ttl`` seconds; samples come ``page_size`` to a page), and so on for the
    other presets (``loopback-ledger``, ``loopback-relay``)."""
    settings.setdefault("queue_delay", 0.05)
    settings.setdefault("slow_delay", 1.0)
    app = create_app(token=token, **settings)
    with BackgroundDevice(app, startup_timeout=startup_timeout, port=port) as server:
        yield RunningDevice(url=server.url, token=token, token_env=token_env, app=app)
