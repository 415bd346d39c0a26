"""``jobkeeper.loopback.serve`` in a process of its own, as the command line runs it:
it listens on 127.0.0.1, checks the token, answers /stats, and stops on SIGTERM."""

from __future__ import annotations

import signal
import socket
import subprocess
import sys
import time

import httpx
import pytest

from jobkeeper.exceptions import ConfigError
from jobkeeper.loopback import serve

TOKEN = "serve-test-token-not-a-secret"


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port: int = probe.getsockname()[1]
        return port


def test_serve_runs_in_the_foreground_and_stops_on_sigterm() -> None:
    port = free_port()
    code = (
        "from jobkeeper.loopback import serve; "
        f"serve(port={port}, token={TOKEN!r}, queue_delay=0.1, log_level='warning')"
    )
    process = subprocess.Popen(
        [sys.executable, "-c", code], stdout=subprocess.PIPE, stderr=subprocess.PIPE
    )
    url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 20
        while True:  # bounded by the deadline
            assert process.poll() is None, process.communicate()[1].decode()
            try:
                if httpx.get(f"{url}/health", timeout=1, trust_env=False).status_code == 200:
                    break
            except httpx.TransportError:
                pass
            assert time.monotonic() < deadline, "the loopback device did not start in 20 s"
            time.sleep(0.1)
        refused = httpx.post(f"{url}/v1/jobs", json={}, timeout=5, trust_env=False)
        assert refused.status_code == 401
        assert refused.headers["WWW-Authenticate"].startswith("Bearer")
        assert TOKEN not in refused.text
        stats = httpx.get(f"{url}/stats", timeout=5, trust_env=False).json()
        assert stats["executions"] == 0 and stats["duplicates"] == 0
    finally:
        process.send_signal(signal.SIGTERM)
        try:
            _, err = process.communicate(timeout=15)
        except subprocess.TimeoutExpired:
            process.kill()
            _, err = process.communicate(timeout=5)
    # uvicorn shuts down gracefully, then re-raises the signal it caught, so the process
    # ends "killed by SIGTERM" as a signalled process should
    assert process.returncode in (0, -signal.SIGTERM), err.decode()
    assert b"Traceback" not in err, err.decode()


@pytest.mark.parametrize("host", ["0.0.0.0", "192.0.2.1", "device.example"])
def test_serve_refuses_non_loopback_hosts(host: str) -> None:
    with pytest.raises(ConfigError, match="loopback addresses only"):
        serve(host=host, port=1, token=TOKEN)


def test_serve_says_when_the_port_is_taken() -> None:
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen()
        port = taken.getsockname()[1]
        with pytest.raises(ConfigError, match=f"cannot listen on 127.0.0.1:{port}"):
            serve(port=port, token=TOKEN)
