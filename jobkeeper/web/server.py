"""Serving the web view with uvicorn: in the foreground (:func:`serve`, for ``jobkeeper
serve``) or on a background thread (:class:`BackgroundView`, for tests and screenshots).

The address is checked before anything binds: a loopback address needs nothing more; any
other address needs an access token, or it is refused (ConfigError, exit 2)."""

from __future__ import annotations

import ipaddress
import socket
import threading
import time
from typing import TYPE_CHECKING, Any

import uvicorn

from jobkeeper.exceptions import ConfigError
from jobkeeper.web.app import create_app

if TYPE_CHECKING:
    from jobkeeper.keeper import Keeper

DEFAULT_PORT = 8600


def is_loopback(host: str) -> bool:
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def check_address(host: str, token: str | None) -> None:
    """Refuse, before binding, a non-loopback address without an access token."""
    if not is_loopback(host) and not token:
        raise ConfigError(
            f"refusing to serve on {host}, which other machines can reach, without an access "
            "token: set one in an environment variable and pass its name with --token-env"
        )


def _config(
    keeper: Keeper, host: str, port: int, token: str | None, **extra: Any
) -> uvicorn.Config:
    check_address(host, token)
    # No access log: a token given as ?token= would be written into it.
    return uvicorn.Config(create_app(keeper, token=token), host=host, port=port,
                          access_log=False, log_level="warning", **extra)  # fmt: skip


def serve(keeper: Keeper, host: str = "127.0.0.1", port: int = DEFAULT_PORT, *,
          token: str | None = None) -> None:  # fmt: skip
    """Serve the view of ``keeper`` until interrupted (Ctrl-C / SIGTERM)."""
    server = uvicorn.Server(_config(keeper, host, port, token))
    server.run()
    if not server.started:
        raise ConfigError(f"could not listen on {host}:{port} (is the port taken?)")


class BackgroundView:
    """The view on a free loopback port, served from a daemon thread::

    with BackgroundView(keeper) as view:
        httpx.get(view.url + "/jobs")
    """

    def __init__(
        self, keeper: Keeper, *, token: str | None = None, host: str = "127.0.0.1"
    ) -> None:
        with socket.socket() as probe:
            probe.bind((host, 0))
            self.port = int(probe.getsockname()[1])
        self.url = f"http://{host}:{self.port}"
        self._server = uvicorn.Server(_config(keeper, host, self.port, token))
        self._thread = threading.Thread(target=self._server.run, daemon=True)

    def __enter__(self) -> BackgroundView:
        self._thread.start()
        deadline = time.monotonic() + 20
        while not self._server.started:
            if time.monotonic() > deadline or not self._thread.is_alive():
                raise RuntimeError("the web view did not start")
            time.sleep(0.02)
        return self

    def __exit__(self, *exc: object) -> None:
        self._server.should_exit = True
        self._thread.join(timeout=10)


__all__ = ["DEFAULT_PORT", "BackgroundView", "check_address", "is_loopback", "serve"]
