"""Running the loopback device under uvicorn: in the foreground (:func:`serve`, for the
command line) or in a background thread (:class:`BackgroundDevice`, for tests)."""

from __future__ import annotations

import ipaddress
import logging
import socket
import threading
import time
from typing import Any, Unpack

import uvicorn

from jobkeeper.exceptions import ConfigError
from jobkeeper.loopback._app import DeviceSettings, LoopbackApp, create_app

#: uvicorn's complaint when an app ends a response early: that is our injected fault.
_CUT_OFF = "ASGI callable returned without completing response."


class _HideInjectedCutOffs(logging.Filter):
    def filter(self, record: logging.LogRecord) -> bool:
        return record.getMessage() != _CUT_OFF


def _quiet_cut_offs() -> None:
    logger = logging.getLogger("uvicorn.error")
    if not any(isinstance(f, _HideInjectedCutOffs) for f in logger.filters):
        logger.addFilter(_HideInjectedCutOffs())


def loopback_address(host: str) -> str:
    """``host`` when it is a loopback address (``localhost`` means 127.0.0.1); anything
    else is refused: the loopback device is for rehearsal on this machine only."""
    if host == "localhost":
        return "127.0.0.1"
    try:
        if ipaddress.ip_address(host).is_loopback:
            return host
    except ValueError:
        pass
    raise ConfigError(
        f"the loopback device listens on loopback addresses only (127.0.0.1, ::1), not {host!r}"
    )


def serve(
    host: str = "127.0.0.1",
    port: int = 8765,
    *,
    token: str,
    log_level: str = "info",
    **settings: Unpack[DeviceSettings],
) -> None:
    """Run the loopback device in the foreground until interrupted (Ctrl-C / SIGTERM).

    ``token`` is the bearer token clients must send; ``settings`` are those of
    :func:`create_app`: ``queue_delay`` the seconds a job waits before it completes;
    ``fault_rate`` the share of ``/v1`` requests that get an injected fault (of the kinds
    in ``faults``), drawn from a generator seeded by ``seed`` (which also seeds the
    device's own choices); ``state`` the SQLite file that keeps its jobs across
    restarts (None: in memory, forgotten when it stops). Raises ConfigError for a
    non-loopback ``host`` or bad settings. ``preset`` is the API shape it speaks
    (``loopback``, or ``exchange``: see ``jobkeeper/profiles/loopback-exchange.toml``).
    """
    address = loopback_address(host)
    try:
        app = create_app(token=token, **settings)
    except ValueError as exc:
        raise ConfigError(f"loopback device: {exc}") from None
    family = socket.AF_INET6 if ":" in address else socket.AF_INET
    listener = socket.socket(family, socket.SOCK_STREAM)
    try:
        listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        listener.bind((address, port))
    except OSError as exc:
        listener.close()
        raise ConfigError(
            f"loopback device cannot listen on {address}:{port}: {exc.strerror}"
        ) from None
    except OverflowError:
        listener.close()
        raise ConfigError(f"loopback device: port {port} is not in 0-65535") from None
    config = uvicorn.Config(
        app, host=address, port=port, http="h11", ws="none", lifespan="off", log_level=log_level
    )
    _quiet_cut_offs()
    try:
        uvicorn.Server(config).run(sockets=[listener])
    finally:
        listener.close()


class BackgroundDevice:
    """The loopback device served by uvicorn in a daemon thread on 127.0.0.1 and a free
    port; ``start()`` waits (bounded) until it listens, ``stop()`` asks uvicorn to exit
    (``should_exit``) and joins the thread (bounded)."""

    def __init__(self, app: LoopbackApp, *, startup_timeout: float = 10.0, port: int = 0) -> None:
        self.app = app
        self._startup_timeout = startup_timeout
        self._socket = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self._socket.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self._socket.bind(("127.0.0.1", port))
        host, port = self._socket.getsockname()
        self.url = f"http://{host}:{port}"
        config = uvicorn.Config(
            app,
            http="h11",
            ws="none",
            lifespan="off",
            log_config=None,
            log_level="warning",
            access_log=False,
            timeout_graceful_shutdown=1,
        )
        self._server = uvicorn.Server(config)
        self._thread = threading.Thread(
            target=self._server.run,
            kwargs={"sockets": [self._socket]},
            name=f"loopback-device-{port}",
            daemon=True,
        )

    def start(self) -> BackgroundDevice:
        _quiet_cut_offs()
        self._thread.start()
        deadline = time.monotonic() + self._startup_timeout
        while not self._server.started:
            if not self._thread.is_alive():
                self._socket.close()
                raise RuntimeError("the loopback device's server thread ended during startup")
            if time.monotonic() > deadline:
                self.stop()
                raise RuntimeError(
                    f"the loopback device did not start in {self._startup_timeout} s"
                )
            time.sleep(0.01)
        return self

    def stop(self, timeout: float = 10.0) -> None:
        self._server.should_exit = True
        if self._thread.is_alive():
            self._thread.join(timeout)
        self._socket.close()
        self.app.device.state.close()

    def __enter__(self) -> BackgroundDevice:
        return self.start()

    def __exit__(self, *exc_info: Any) -> None:
        self.stop()
