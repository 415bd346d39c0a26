"""The generic REST device adapter: any HTTP device described by a device profile.

Configured in the keep's ``config.toml``::

    [backends.rehearsal]
    adapter = "rest"
    profile = "loopback"            # a shipped profile's name, or the path of a TOML file
    url = "http://127.0.0.1:8765"   # https:// for anything but a loopback address
    token_env = "JOBKEEPER_REHEARSAL_TOKEN"   # the NAME of the variable holding the token
    timeout = 30                    # optional: seconds, or {connect, read, write, pool}
    max_connections = 10            # optional
    max_qubits = 20                 # optional: below the profile's limit
    pricing = { per_task = 0.0, per_shot = 0.001, currency = "credits" }   # optional

The token is read from the environment variable at each request and never kept, logged,
put in an error message, a repr, :class:`~jobkeeper.backend.BackendInfo` or the config hash.

Calibration: when the profile has a calibration request, the snapshot is fetched at
submission (cached per instance for the profile's ``ttl``) and recorded in the result's
metadata under ``"calibration"``. ``info`` is a plain property and never does I/O: call
``await backend.refresh_calibration()`` first to have ``info.calibration`` filled in.
"""

from __future__ import annotations

import asyncio
import os
import time
from collections import OrderedDict
from collections.abc import Mapping
from datetime import UTC, datetime
from typing import Any

import httpx

from jobkeeper._version import __version__
from jobkeeper.backend import BackendInfo, Polled, Pricing, Result, Started, Task
from jobkeeper.backends.rest.config import parse_config
from jobkeeper.backends.rest.http import (
    DEFAULT_IN_CALL_RETRY,
    DEFAULT_MAX_ANSWER,
    DEFAULT_TIMEOUTS,
    MAX_HANDLE,
    DeviceAuthError,
    InCallRetry,
    Reply,
    Timeouts,
    Wire,
)
from jobkeeper.backends.rest.profile import DeviceProfile, RequestSpec, load_profile
from jobkeeper.backends.rest.redaction import Redactor
from jobkeeper.backends.rest.results import outcome_from, pick, pick_text
from jobkeeper.backends.rest.session import DeviceSession, Outgoing
from jobkeeper.backends.rest.wire import fill_path, fill_template, structured_string
from jobkeeper.exceptions import PermanentBackendError
from jobkeeper.hashing import digest_of

__all__ = [
    "DeviceAuthError",
    "InCallRetry",
    "RestBackend",
    "Timeouts",
    "from_config",
]

#: how many submissions' calibration snapshots an instance remembers until their poll.
_REMEMBERED_HANDLES = 10_000


def _user_agent() -> str:
    return f"jobkeeper/{__version__}"


class RestBackend:
    """A remote device behind HTTP, spoken to as its :class:`DeviceProfile` describes.

    Implements :class:`jobkeeper.backend.Backend`. ``start`` sends the job key as the
    idempotency key, so a repeated ``start`` (after a crash or a lost answer) finds the
    same device job instead of creating a second one.
    """

    def __init__(
        self,
        *,
        name: str,
        profile: DeviceProfile,
        url: str,
        token_env: str,
        timeouts: Timeouts = DEFAULT_TIMEOUTS,
        max_connections: int = 10,
        retry: InCallRetry = DEFAULT_IN_CALL_RETRY,
        max_answer: int = DEFAULT_MAX_ANSWER,
        pricing: Pricing | None = None,
        max_qubits: int | None = None,
        ca_file: str | None = None,
        trust_env: bool = False,
        config_hash: str = "",
        environ: Mapping[str, str] | None = None,
        transport: httpx.AsyncBaseTransport | None = None,
    ) -> None:
        self._name = name
        self._profile = profile
        self._url = url.rstrip("/")
        self._token_env = token_env
        self._pricing = pricing
        self._max_qubits = min(max_qubits or profile.device.max_qubits, profile.device.max_qubits)
        self._config_hash = config_hash
        self._environ = environ if environ is not None else os.environ
        self._session = DeviceSession(
            url=url,
            wire=Wire(
                backend=name,
                token_env=token_env,
                retry_header=profile.retry_hint.header,
                message_pointer=profile.errors.message,
            ),
            user_agent=_user_agent(),
            redactor=Redactor(),
            timeouts=timeouts,
            max_connections=max_connections,
            retry=retry,
            max_answer=max_answer,
            ca_file=ca_file,
            trust_env=trust_env,
            transport=transport,
        )
        self._profile_digest = profile.digest()
        self._calibration: dict[str, Any] | None = None
        self._calibration_at = 0.0
        self._calibration_lock = asyncio.Lock()
        self._calibration_by_handle: OrderedDict[str, dict[str, Any] | None] = OrderedDict()

    def __repr__(self) -> str:
        return (
            f"RestBackend(name={self._name!r}, url={self._url!r}, "
            f"profile={self._profile.device.name!r}, token_env={self._token_env!r})"
        )

    # ------------------------------------------------------------------ description

    @property
    def profile(self) -> DeviceProfile:
        return self._profile

    @property
    def info(self) -> BackendInfo:
        device = self._profile.device
        natives = device.native_operations
        return BackendInfo(
            name=self._name,
            kind="remote",
            version=f"{device.name}/{device.version}",
            max_qubits=self._max_qubits,
            max_shots=device.max_shots,
            native_operations=frozenset(natives) if natives is not None else None,
            mid_circuit_measurement=device.mid_circuit_measurement,
            deterministic=device.deterministic,
            pricing=self._pricing,
            calibration=self._calibration,
            config_hash=self._config_hash,
            description=device.description,
        )

    # ------------------------------------------------------------------ HTTP

    def _token(self) -> str:
        token = self._environ.get(self._token_env, "")
        if not token.strip():
            raise DeviceAuthError(
                f"{self._name}: environment variable {self._token_env} is not set or empty; "
                "it must hold the device's token"
            )
        self._session.redactor.add(token.strip())
        return token.strip()

    async def _auth_headers(self) -> dict[str, str]:
        token = self._token()
        auth = self._profile.auth
        return {auth.header: f"{auth.scheme} {token}" if auth.scheme else token}

    async def _send(
        self,
        op: str,
        spec: RequestSpec,
        *,
        handle: str | None = None,
        body: Any = None,
        key: str | None = None,
    ) -> Reply:
        headers: dict[str, str] = {}
        if key is not None:
            idem = self._profile.idempotency
            headers[idem.header] = structured_string(key) if idem.structured else key
        request = Outgoing(
            spec.method, fill_path(spec.path, handle=handle), body=body, headers=headers
        )
        return await self._session.send(op, request, self._auth_headers)

    # ------------------------------------------------------------------ calibration

    async def refresh_calibration(self, *, force: bool = False) -> Mapping[str, Any] | None:
        """The device's calibration snapshot (None when the profile has no calibration
        request), fetched when older than the profile's ``ttl`` (or when ``force``).
        Afterwards ``info.calibration`` holds it. The snapshot is
        ``{"device", "fetched_at", "data"}``, ``data`` being what the device sent.
        ``start`` calls it first: when the fetch fails, the submission fails (as a
        transient error), so that no job runs without its calibration on record."""
        spec = self._profile.requests.calibration
        if spec is None:
            return None
        async with self._calibration_lock:
            age = time.monotonic() - self._calibration_at
            if self._calibration is not None and not force and age < spec.ttl:
                return self._calibration
            reply = await self._send("calibration", spec)
            data = pick(reply.document, spec.snapshot, "calibration", self._profile)
            self._calibration = {
                "device": self._profile.device.name,
                "fetched_at": datetime.now(UTC).isoformat(timespec="seconds"),
                "data": self._session.redactor.document(data),
            }
            self._calibration_at = time.monotonic()
            return self._calibration

    def _remember(self, handle: str, calibration: dict[str, Any] | None) -> None:
        self._calibration_by_handle[handle] = calibration
        self._calibration_by_handle.move_to_end(handle)
        while len(self._calibration_by_handle) > _REMEMBERED_HANDLES:
            self._calibration_by_handle.popitem(last=False)

    # ------------------------------------------------------------------ Backend

    def _check(self, task: Task) -> None:
        device = self._profile.device
        if not task.circuit_text.strip():
            raise PermanentBackendError(
                f"{self._name}: the task has no circuit text (remote devices are sent the "
                "canonical OpenQASM text)"
            )
        if task.circuit.num_qubits > self._max_qubits:
            raise PermanentBackendError(
                f"{self._name}: the circuit has {task.circuit.num_qubits} qubits; "
                f"this device takes at most {self._max_qubits}"
            )
        if task.exact and self._profile.results.probabilities is None:
            raise PermanentBackendError(
                f"{self._name}: device {device.name} gives counts, not exact probabilities"
            )
        if task.shots > device.max_shots:
            raise PermanentBackendError(
                f"{self._name}: {task.shots} shots asked; device {device.name} takes at most "
                f"{device.max_shots}"
            )

    async def start(self, task: Task, *, client_key: str) -> Started:
        """Submit ``task`` with ``client_key`` as the idempotency key, and return the
        device's job id as the handle. Safe to call again with the same key."""
        self._check(task)
        self._token()  # a missing token fails before anything is fetched
        calibration = await self.refresh_calibration()
        spec = self._profile.requests.submit
        values = {
            "circuit": task.circuit_text,
            "shots": task.shots,
            "seed": task.seed,
            "exact": task.exact,
            "client_key": client_key,
            "options": dict(task.options),
        }
        try:
            body = fill_template(spec.body or {}, values)
            reply = await self._send("submit", spec, body=body, key=client_key)
        except (ValueError, TypeError) as exc:  # an unprintable key; options not JSON
            raise PermanentBackendError(f"{self._name}: cannot send the job: {exc}") from None
        raw = pick(reply.document, spec.handle, "submit", self._profile)
        if isinstance(raw, bool) or not isinstance(raw, str | int) or str(raw) == "":
            raise PermanentBackendError(
                f"{self._name}: the device's job id at {spec.handle!r} is {raw!r}, "
                "not a non-empty string or integer"
            )
        handle = str(raw)
        if len(handle.encode("utf-8")) > MAX_HANDLE:
            raise PermanentBackendError(
                f"{self._name}: the device's job id is {len(handle.encode('utf-8'))} bytes "
                f"long; at most {MAX_HANDLE} are accepted"
            )
        if self._session.redactor.holds_secret(handle):
            raise PermanentBackendError(
                f"{self._name}: the device's job id holds a secret; it is not kept"
            )
        self._remember(handle, dict(calibration) if calibration is not None else None)
        return Started(handle=handle, poll_after=reply.retry_after)

    async def poll(self, handle: str) -> Polled:
        """The device job's state; its result once done."""
        requests = self._profile.requests
        reply = await self._send("status", requests.status, handle=handle)
        word = pick_text(reply.document, requests.status.state, "status", self._profile)
        state = self._profile.states.get(word)
        if state is None:
            known = ", ".join(sorted(self._profile.states))
            raise PermanentBackendError(
                f"{self._name}: the device reported status {word!r} for job {handle}, which "
                f"profile {self._profile.device.name!r} does not map (it knows: {known})"
            )
        if state == "waiting":
            return Polled(state="waiting", poll_after=reply.retry_after)
        if state in ("failed", "cancelled"):
            self._calibration_by_handle.pop(handle, None)
            message = f"device job {handle} ended {word!r}"
            pointer = requests.status.message
            if pointer is not None:
                detail = pick_text(reply.document, pointer, "status", self._profile, default="")
                message += f": {self._session.redactor.text(detail)}" if detail else ""
            return Polled(state=state, message=message)
        document = reply.document
        if requests.result is not None:
            document = (await self._send("result", requests.result, handle=handle)).document
        counts, probabilities, device_metadata = outcome_from(document, self._profile)
        # the snapshot taken when this instance submitted the job; after a restart, the
        # latest one (its fetched_at says when it was taken)
        calibration = self._calibration_by_handle.pop(handle, self._calibration)
        metadata: dict[str, Any] = {
            "device": self._profile.device.name,
            "device_job": handle,
            "profile_digest": self._profile_digest,
            "calibration": calibration,
        }
        if device_metadata is not None:
            metadata["device_metadata"] = self._session.redactor.document(device_metadata)
        return Polled(
            state="done",
            result=Result(counts=counts, probabilities=probabilities, metadata=metadata),
        )

    async def cancel(self, handle: str) -> None:
        """Ask the device to cancel. A job that already ended is left as it is (the next
        poll says how it ended)."""
        spec = self._profile.requests.cancel
        if spec is None:
            raise PermanentBackendError(
                f"{self._name}: device {self._profile.device.name} has no cancel request"
            )
        await self._send("cancel", spec, handle=handle)

    async def aclose(self) -> None:
        await self._session.aclose()

    async def __aenter__(self) -> RestBackend:
        return self

    async def __aexit__(self, *exc_info: object) -> None:
        await self.aclose()


def from_config(name: str, config: Mapping[str, Any]) -> RestBackend:
    """The registry's factory: a :class:`RestBackend` from a ``[backends.NAME]`` table.
    Raises :class:`~jobkeeper.exceptions.ConfigError` naming every problem."""
    settings = parse_config(name, config)
    return RestBackend(
        name=name,
        profile=load_profile(settings.profile),
        url=settings.url,
        token_env=settings.token_env,
        timeouts=settings.timeouts(),
        max_connections=settings.max_connections,
        retry=settings.in_call_retry(),
        max_answer=settings.max_answer,
        pricing=settings.pricing_value(),
        max_qubits=settings.max_qubits,
        ca_file=settings.ca_file,
        trust_env=settings.trust_env,
        # the config holds only the token's variable NAME, never a secret (parse_config
        # refuses secret-looking keys), so all of it enters the hash.
        config_hash=digest_of(dict(config)),
    )
