"""Test doubles shipped with jobkeeper, for our tests and for users' own.

:class:`RecordingBackend` behaves like a well-made remote device: ``start`` is idempotent
on the client key, and every execution leaves a result file in a ledger folder, so a test can
count executions across processes (a worker that is killed and restarted included).
Its counts are a deterministic function of the client key and the shots, so two
executions of one job would be indistinguishable by their results: only the ledger tells.

:class:`FlakyBackend` fails the first ``failures`` starts of each job with a transient
error (optionally with a retry hint), then succeeds.
"""

from __future__ import annotations

import asyncio
import fcntl
import hashlib
import json
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from jobkeeper.backend import BackendInfo, Polled, Result, Started, Task
from jobkeeper.exceptions import PermanentBackendError, TransientBackendError
from jobkeeper.hashing import digest_of


def _fake_counts(client_key: str, shots: int, num_bits: int) -> dict[str, int]:
    width = max(num_bits, 1)
    seed = int(hashlib.sha256(client_key.encode()).hexdigest()[:8], 16)
    first = format(seed % (2**width), f"0{width}b")
    second = format((seed // 7) % (2**width), f"0{width}b")
    if first == second:
        return {first: shots}
    return {first: shots - shots // 3, second: shots // 3}


class RecordingBackend:
    """A device stand-in that records every execution in ``ledger_dir``."""

    def __init__(
        self, name: str, ledger_dir: Path, *, delay: float = 0.0, echo_seed: bool = True
    ) -> None:
        self.name = name
        self.ledger_dir = Path(ledger_dir)
        self.ledger_dir.mkdir(parents=True, exist_ok=True)
        self.delay = delay
        # Many devices never say which seed they used: ``echo_seed=False`` plays one.
        self.echo_seed = echo_seed

    @property
    def info(self) -> BackendInfo:
        return BackendInfo(
            name=self.name, kind="remote", version="recording-1", max_qubits=64,
            deterministic=True, config_hash=digest_of({"recording": str(self.ledger_dir)}),
        )  # fmt: skip

    def _result_path(self, client_key: str) -> Path:
        return self.ledger_dir / (client_key.removeprefix("sha256:") + ".json")

    async def start(self, task: Task, *, client_key: str) -> Started:
        path = self._result_path(client_key)
        lock = self.ledger_dir / "ledger.lock"
        if self.delay:
            # The device's work, outside the ledger lock so devices run in parallel.
            await asyncio.sleep(self.delay)
        with open(lock, "a") as handle:
            fcntl.flock(handle, fcntl.LOCK_EX)
            try:
                with open(self.ledger_dir / "starts.log", "a") as starts:
                    starts.write(client_key + "\n")
                if path.exists():
                    stored = json.loads(path.read_text())
                    return Started(result=Result(counts=stored, metadata={"replayed": True}))
                counts = _fake_counts(client_key, task.shots, task.circuit.num_clbits)
                # The execution and its idempotency record are one atomic step (a rename),
                # as on a real device: a crash cannot leave one without the other.
                tmp = path.with_suffix(".tmp")
                tmp.write_text(json.dumps(counts))
                os.replace(tmp, path)
            finally:
                fcntl.flock(handle, fcntl.LOCK_UN)
        metadata = {"seed": str(task.seed)} if self.echo_seed else {}
        return Started(result=Result(counts=counts, metadata=metadata))

    async def poll(self, handle: str) -> Polled:
        raise PermanentBackendError("the recording backend has no remote handles")

    async def cancel(self, handle: str) -> None:
        return None

    async def aclose(self) -> None:
        return None


def executions(ledger_dir: Path) -> list[str]:
    """The client keys of every execution a RecordingBackend made."""
    return sorted("sha256:" + p.stem for p in Path(ledger_dir).glob("*.json"))


def starts(ledger_dir: Path) -> list[str]:
    """Every ``start`` call it received, in order (client keys): more than the executions
    when a worker died after starting a job and another started it again."""
    path = Path(ledger_dir) / "starts.log"
    return path.read_text().split() if path.exists() else []


def recording_backend(name: str, config: Mapping[str, Any]) -> RecordingBackend:
    """Factory for config.toml: ``adapter = "recording"`` (registered as an entry point)."""
    return RecordingBackend(
        name, Path(config["ledger_dir"]), delay=float(config.get("delay", 0)),
        echo_seed=bool(config.get("echo_seed", True)),
    )  # fmt: skip


class FlakyBackend(RecordingBackend):
    """Transient failures first, then success (counts as RecordingBackend)."""

    def __init__(
        self, name: str, ledger_dir: Path, *, failures: int = 2, retry_after: float | None = None,
        permanent_message: str | None = None,
    ) -> None:  # fmt: skip
        super().__init__(name, ledger_dir)
        self.failures = failures
        self.retry_after = retry_after
        self.permanent_message = permanent_message

    async def start(self, task: Task, *, client_key: str) -> Started:
        if self.permanent_message is not None:
            raise PermanentBackendError(self.permanent_message)
        tries = self.ledger_dir / (client_key.removeprefix("sha256:") + ".tries")
        count = int(tries.read_text()) if tries.exists() else 0
        tries.write_text(str(count + 1))
        if count < self.failures:
            raise TransientBackendError(
                f"simulated transient fault {count + 1} of {self.failures}",
                retry_after=self.retry_after,
            )
        return await super().start(task, client_key=client_key)


def flaky_backend(name: str, config: Mapping[str, Any]) -> FlakyBackend:
    """Factory for config.toml: ``adapter = "flaky"`` (registered as an entry point)."""
    return FlakyBackend(
        name, Path(config["ledger_dir"]), failures=int(config.get("failures", 2)),
        retry_after=config.get("retry_after"), permanent_message=config.get("permanent_message"),
    )  # fmt: skip
