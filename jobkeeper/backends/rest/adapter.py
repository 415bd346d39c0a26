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
from dataclasses import replace
from datetime import UTC, datetime
from typing import Any

import httpx

from jobkeeper._version import __version__
from jobkeeper.backend import BackendInfo, Polled, Pricing, Result, Started, Task
from jobkeeper.backends.rest.config import parse_config
from jobkeeper.backends.rest.credentials import Credentials, make_credentials
from jobkeeper.backends.rest.handles import JobRef, device_handle
from jobkeeper.backends.rest.http import (
    DEFAULT_IN_CALL_RETRY,
    DEFAULT_MAX_ANSWER,
    DEFAULT_TIMEOUTS,
    DeviceAuthError,
    InCallRetry,
    Reply,
    Timeouts,
    Wire,
)
from jobkeeper.backends.rest.pages import read_outcome
from jobkeeper.backends.rest.probe import probe_device
from jobkeeper.backends.rest.profile import DeviceProfile, RequestSpec, load_profile
from jobkeeper.backends.rest.redaction import Redactor
from jobkeeper.backends.rest.results import outcome_from, pick, pick_text
from jobkeeper.backends.rest.session import DeviceSession, Outgoing
from jobkeeper.backends.rest.wire import fill_path, fill_template, structured_string
from jobkeeper.circuit.openqasm3 import openqasm3_text
from jobkeeper.exceptions import CircuitError, PermanentBackendError
from jobkeeper.hashing import digest_of
from jobkeeper.probing import ProbeReport

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
        token_env: str | None = None,
        client_id_env: str | None = None,
        client_secret_env: str | None = None,
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
        self._pricing = pricing
        self._max_qubits = min(max_qubits or profile.device.max_qubits, profile.device.max_qubits)
        self._config_hash = config_hash
        environ = environ if environ is not None else os.environ
        redactor = Redactor()
        self._session = DeviceSession(
            url=url,
            wire=Wire(
                backend=name,
                credentials="",
                retry_header=profile.retry_hint.header,
                message_pointer=profile.errors.message,
                conflict_names_job=profile.requests.submit.repeats == "conflict",
            ),
            user_agent=_user_agent(),
            redactor=redactor,
            timeouts=timeouts,
            max_connections=max_connections,
            retry=retry,
            max_answer=max_answer,
            ca_file=ca_file,
            trust_env=trust_env,
            transport=transport,
        )
        self._credentials = make_credentials(
            name, profile, self._session, environ,
            token_env=token_env, client_id_env=client_id_env, client_secret_env=client_secret_env,
        )  # fmt: skip
        self._session.wire = replace(self._session.wire, credentials=self._credentials.describe())
        self._noted = profile.format >= 2
        self._profile_digest = profile.digest()
        self._calibration: dict[str, Any] | None = None
        self._calibration_at = 0.0
        self._calibration_lock = asyncio.Lock()
        self._calibration_by_handle: OrderedDict[str, dict[str, Any] | None] = OrderedDict()

    def __repr__(self) -> str:
        return (
            f"RestBackend(name={self._name!r}, url={self._url!r}, "
            f"profile={self._profile.device.name!r}, credentials={self._credentials.names()!r})"
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

    @property
    def credentials(self) -> Credentials:
        return self._credentials

    async def _send(
        self,
        op: str,
        spec: RequestSpec,
        *,
        handle: str | None = None,
        body: Any = None,
        key: str | None = None,
        form: bool = False,
        target: str | None = None,
    ) -> Reply:
        headers: dict[str, str] = {}
        if key is not None:
            idem = self._profile.idempotency
            headers[idem.header] = structured_string(key) if idem.structured else key
        whole = self._profile.requests.submit.handle_part == "path"
        path = target or fill_path(spec.path, handle=handle, whole_path=whole)
        if whole and target is None and handle is not None:
            # the handle is a path on the device's origin, not below the backend's URL
            path = str(httpx.URL(self._session.url).join(path))
        request = Outgoing(spec.method, path, body=body, form=form, headers=headers)
        return await self._session.send(
            op, request, self._credentials.headers, on_refused=self._credentials.renew
        )

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
                "data": self._redactor.document(data),
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

    def _program(self, task: Task) -> str:
        if self._profile.requests.submit.program == "openqasm2":
            return task.circuit_text
        try:
            return openqasm3_text(task.circuit)
        except CircuitError as exc:
            raise PermanentBackendError(f"{self._name}: {exc}") from None

    async def start(self, task: Task, *, client_key: str) -> Started:
        """Submit ``task`` with ``client_key`` as the idempotency key, and return the
        device's job id as the handle. Safe to call again with the same key."""
        self._check(task)
        self._credentials.check()  # missing credentials fail before anything is fetched
        calibration = await self.refresh_calibration()
        spec = self._profile.requests.submit
        values = {
            "circuit": self._program(task),
            "shots": task.shots,
            "seed": task.seed,
            "exact": task.exact,
            "client_key": client_key,
            "options": dict(task.options),
        }
        try:
            body = fill_template(spec.body or {}, values)
            form = spec.body_format == "form"
            reply = await self._send("submit", spec, body=body, key=client_key, form=form)
        except (ValueError, TypeError) as exc:  # an unprintable key; options not JSON
            raise PermanentBackendError(f"{self._name}: cannot send the job: {exc}") from None
        try:
            device = device_handle(reply, self._profile, self._session.url, self._redactor)
        except PermanentBackendError as exc:
            raise PermanentBackendError(f"{self._name}: {exc}") from None
        ref = JobRef(device)
        if self._noted:
            widths = tuple(reg.size for reg in task.circuit.cregs)
            ref = JobRef(device, shots=task.shots, registers=widths)
        handle = ref.stored()
        self._remember(handle, dict(calibration) if calibration is not None else None)
        return Started(handle=handle, poll_after=reply.retry_after)

    async def poll(self, handle: str) -> Polled:
        """The device job's state; its result once done."""
        requests = self._profile.requests
        ref = JobRef.read(handle, noted=self._noted)
        reply = await self._send("status", requests.status, handle=ref.device)
        word = pick_text(reply.document, requests.status.state, "status", self._profile)
        state = self._profile.states.get(word)
        if state is None:
            known = ", ".join(sorted(self._profile.states))
            raise PermanentBackendError(
                f"{self._name}: the device reported status {word!r} for job {ref.device}, which "
                f"profile {self._profile.device.name!r} does not map (it knows: {known})"
            )
        if state == "waiting":
            return Polled(state="waiting", poll_after=reply.retry_after)
        if state in ("failed", "cancelled"):
            self._calibration_by_handle.pop(handle, None)
            message = f"device job {ref.device} ended {word!r}"
            pointer = requests.status.message
            if pointer is not None:
                detail = pick_text(reply.document, pointer, "status", self._profile, default="")
                message += f": {self._redactor.text(detail)}" if detail else ""
            return Polled(state=state, message=message)
        if requests.result is not None:
            reply = await self._send("result", requests.result, handle=ref.device)
        counts, probabilities, device_metadata = await self._outcome(reply, ref)
        # the snapshot taken when this instance submitted the job; after a restart, the
        # latest one (its fetched_at says when it was taken)
        calibration = self._calibration_by_handle.pop(handle, self._calibration)
        metadata: dict[str, Any] = {
            "device": self._profile.device.name,
            "device_job": ref.device,
            "profile_digest": self._profile_digest,
            "calibration": calibration,
        }
        if device_metadata is not None:
            metadata["device_metadata"] = self._redactor.document(device_metadata)
        return Polled(
            state="done",
            result=Result(counts=counts, probabilities=probabilities, metadata=metadata),
        )

    async def _outcome(
        self, reply: Reply, ref: JobRef
    ) -> tuple[dict[str, int] | None, dict[str, float] | None, Any]:
        if not self._noted:
            return outcome_from(reply.document, self._profile)

        async def fetch(target: str) -> Reply:
            return await self._send("result", self._result_spec(), target=target)

        return await read_outcome(reply, self._profile, ref, fetch, self._session.url)

    def _result_spec(self) -> RequestSpec:
        requests = self._profile.requests
        return requests.result if requests.result is not None else requests.status

    @property
    def _redactor(self) -> Redactor:
        return self._session.redactor

    async def cancel(self, handle: str) -> None:
        """Ask the device to cancel. A job that already ended is left as it is (the next
        poll says how it ended)."""
        spec = self._profile.requests.cancel
        if spec is None:
            raise PermanentBackendError(
                f"{self._name}: device {self._profile.device.name} has no cancel request"
            )
        await self._send("cancel", spec, handle=JobRef.read(handle, noted=self._noted).device)

    async def probe(self) -> ProbeReport:
        """Reachability, authentication (the token request included) and a calibration
        read, with what the profile declares; nothing is submitted."""
        return await probe_device(
            self._name,
            self._profile,
            self._session,
            self._credentials,
            lambda: self.refresh_calibration(force=True),
        )

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
        client_id_env=settings.client_id_env,
        client_secret_env=settings.client_secret_env,
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
