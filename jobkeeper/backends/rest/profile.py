"""Device profiles: how one REST device speaks, described in a TOML file.

A profile says which header carries the token, which requests submit a job, ask for its
status and result, cancel it and (optionally) fetch the device's calibration, where the
interesting values sit in the device's JSON answers (JSON Pointers, RFC 6901), and how
the device's status words map onto jobkeeper's states. The shipped profiles live in
``jobkeeper/profiles/`` (``loopback`` is the default); a profile can also be any TOML
file. See ``jobkeeper/profiles/loopback.toml`` for a complete, commented example.
"""

from __future__ import annotations

import tomllib
from importlib import resources
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from jobkeeper.backend import RemoteState
from jobkeeper.backends.rest.results_spec import ResultsSpec
from jobkeeper.backends.rest.wire import (
    BODY_FIELDS,
    PATH_FIELDS,
    Pointer,
    template_fields,
    template_strings,
)
from jobkeeper.exceptions import ConfigError
from jobkeeper.hashing import digest_of

#: the newest profile format; format 1 files keep working (they use none of format 2's keys).
PROFILE_FORMAT: Literal[2] = 2
DEFAULT_PROFILE = "loopback"


HttpMethod = Literal["GET", "POST", "PUT", "PATCH", "DELETE"]


class _Model(BaseModel):
    # Unknown keys are errors: a typo in a profile must not be silently ignored.
    model_config = ConfigDict(extra="forbid", frozen=True)


class DeviceSpec(_Model):
    """What the device is. ``deterministic`` is false for a device that samples."""

    name: str = Field(min_length=1)
    description: str = ""
    version: str = "1"
    deterministic: bool = False
    max_qubits: int = Field(default=32, ge=1)
    max_shots: int = Field(default=1_000_000, ge=1)
    mid_circuit_measurement: bool = False
    native_operations: list[str] | None = None


class TokenRequestSpec(_Model):
    """OAuth 2.0 client credentials (RFC 6749 §4.4): where to ask for an access token.
    ``path`` is a path on the device's URL or an absolute URL; ``client_auth`` sends the
    client id and secret with HTTP Basic (``basic``, RFC 6749 §2.3.1) or as form fields
    (``body``)."""

    path: str = Field(min_length=1)
    scope: str | None = None
    client_auth: Literal["basic", "body"] = "basic"

    @model_validator(mode="after")
    def _check_path(self) -> TokenRequestSpec:
        if not self.path.startswith(("/", "https://", "http://")):
            raise ValueError(f"path {self.path!r} must start with '/' or be an absolute URL")
        host = self.path.removeprefix("http://").split("/", 1)[0].split(":", 1)[0]
        if self.path.startswith("http://") and host not in ("127.0.0.1", "localhost", "[::1]"):
            raise ValueError("the client secret travels to the token endpoint: use https://")
        return self


class AuthSpec(_Model):
    """How requests are authenticated: a static token from the environment (``token``),
    or an access token obtained with OAuth 2.0 client credentials
    (``client_credentials``, format 2). Either way the token goes in ``header`` as
    ``scheme token`` (``scheme = ""`` sends the bare token)."""

    kind: Literal["token", "client_credentials"] = "token"
    header: str = Field(default="Authorization", min_length=1)
    scheme: str = "Bearer"
    token_request: TokenRequestSpec | None = None

    @model_validator(mode="after")
    def _check_kind(self) -> AuthSpec:
        if self.kind == "client_credentials" and self.token_request is None:
            raise ValueError("client_credentials needs [auth.token_request]")
        if self.kind == "token" and self.token_request is not None:
            raise ValueError("a token_request needs kind = 'client_credentials'")
        return self


class IdempotencySpec(_Model):
    """The idempotency header (IETF draft-ietf-httpapi-idempotency-key-header).
    ``structured`` sends the key as the draft says, an RFC 8941 String (double-quoted);
    false sends it bare, for devices that expect that."""

    header: str = Field(default="Idempotency-Key", min_length=1)
    structured: bool = True


class RetryHintSpec(_Model):
    """The header in which the device says when to come back (RFC 9110 §10.2.3)."""

    header: str = Field(default="Retry-After", min_length=1)


class ErrorSpec(_Model):
    """Where a device's error answer keeps its human-readable message."""

    message: Pointer | None = None


class RequestSpec(_Model):
    """One HTTP request: method, path template and optional JSON body template."""

    method: HttpMethod = "GET"
    path: str = Field(min_length=1)
    body: dict[str, Any] | None = None

    @model_validator(mode="after")
    def _check_templates(self) -> RequestSpec:
        if not self.path.startswith(("/", "{handle}")):
            raise ValueError(f"path {self.path!r} must start with '/' (or with {{handle}})")
        for name in template_fields(self.path):
            if name not in PATH_FIELDS:
                raise ValueError(
                    f"unknown placeholder {{{name}}} in path {self.path!r}; "
                    f"a path may hold {{handle}}"
                )
        for text in template_strings(self.body or {}):
            for name in template_fields(text):
                if name not in BODY_FIELDS:
                    known = ", ".join(f"{{{field}}}" for field in sorted(BODY_FIELDS))
                    raise ValueError(
                        f"unknown placeholder {{{name}}} in body; a body may hold {known}"
                    )
                if name == "options" and text != "{options}":
                    raise ValueError("{options} is an object: it must be a whole value")
        return self

    def path_fields(self) -> list[str]:
        return template_fields(self.path)


class SubmitSpec(RequestSpec):
    """The submission. The device's job id, the handle, is found at the JSON Pointer
    ``handle`` in the answer, or (format 2) in the ``Location`` header of a 201, 202 or
    303 answer (RFC 9110 §10.2.2), resolved against the request URL: its last path
    segment, or its whole path (``handle_part``). ``repeats`` says how the device answers
    a repeated idempotency key: with the same answer again (``same``), with 303 and the
    existing job's ``Location`` (``see_other``), with 409 naming the existing job at
    ``conflict_handle`` (or in ``Location``) (``conflict``), or with 200 and the existing
    job (``existing``), named at ``handle`` or, with ``handle_from = "location"``, by the
    answer's ``Content-Location`` (RFC 9110 §8.7). ``body_format`` sends the body as JSON
    or form-encoded (``application/x-www-form-urlencoded``). ``program`` is the language
    of ``{circuit}``: the canonical OpenQASM 2.0 text, or that circuit written as
    OpenQASM 3 (:mod:`jobkeeper.circuit.openqasm3`)."""

    method: HttpMethod = "POST"
    handle: Pointer | None = None
    handle_from: Literal["answer", "location"] = "answer"
    handle_part: Literal["last_segment", "path"] = "last_segment"
    repeats: Literal["same", "see_other", "conflict", "existing"] = "same"
    conflict_handle: Pointer | None = None
    body_format: Literal["json", "form"] = "json"
    program: Literal["openqasm2", "openqasm3"] = "openqasm2"

    @model_validator(mode="after")
    def _check_submit(self) -> SubmitSpec:
        if self.path_fields():
            raise ValueError("the submit path cannot hold {handle}: there is no job yet")
        names = {n for text in template_strings(self.body or {}) for n in template_fields(text)}
        if "circuit" not in names:
            raise ValueError("the submit body must send the circuit: put {circuit} in it")
        if self.handle_from == "answer" and self.handle is None:
            raise ValueError("handle: give the JSON Pointer to the job id in the answer")
        if self.handle_from == "location" and self.handle is not None:
            raise ValueError("handle: not used when handle_from = 'location'")
        if self.conflict_handle is not None and self.repeats != "conflict":
            raise ValueError("conflict_handle: only used with repeats = 'conflict'")
        if self.body_format == "form":
            for key, value in (self.body or {}).items():
                if not isinstance(value, str | int | float | bool):
                    raise ValueError(f"a form body holds plain values; {key!r} is not one")
                if value == "{options}":
                    raise ValueError("{options} is an object: a form body cannot send it")
        return self


class _JobRequestSpec(RequestSpec):
    @model_validator(mode="after")
    def _check_handle(self) -> _JobRequestSpec:
        if "handle" not in self.path_fields():
            raise ValueError(f"path {self.path!r} must hold {{handle}}, the device's job id")
        return self


class StatusSpec(_JobRequestSpec):
    """The status request: ``state`` locates the device's status word, ``message`` an
    optional explanation (used when the job failed)."""

    state: Pointer
    message: Pointer | None = None


class ResultSpec(_JobRequestSpec):
    """The result request, sent once the status says done."""


class CancelSpec(_JobRequestSpec):
    method: HttpMethod = "POST"


class CalibrationSpec(RequestSpec):
    """The calibration request: ``snapshot`` locates the calibration data in the answer,
    kept for ``ttl`` seconds per backend instance."""

    snapshot: Pointer = ""
    ttl: float = Field(default=300.0, ge=0)

    @model_validator(mode="after")
    def _check_no_handle(self) -> CalibrationSpec:
        if self.path_fields():
            raise ValueError("the calibration path cannot hold {handle}")
        return self


class RequestsSpec(_Model):
    submit: SubmitSpec
    status: StatusSpec
    result: ResultSpec | None = None
    cancel: CancelSpec | None = None
    calibration: CalibrationSpec | None = None


class DeviceProfile(_Model):
    """A whole profile file."""

    format: Literal[1, 2] = PROFILE_FORMAT
    device: DeviceSpec
    auth: AuthSpec = AuthSpec()
    idempotency: IdempotencySpec = IdempotencySpec()
    retry_hint: RetryHintSpec = RetryHintSpec()
    errors: ErrorSpec = ErrorSpec()
    requests: RequestsSpec
    results: ResultsSpec
    #: the device's status words → jobkeeper's states.
    states: dict[str, RemoteState]

    @model_validator(mode="after")
    def _check_states(self) -> DeviceProfile:
        if "done" not in self.states.values():
            raise ValueError("states must map at least one of the device's words to 'done'")
        return self

    @model_validator(mode="after")
    def _check_format(self) -> DeviceProfile:
        if self.format == 1:
            newer = format_2_keys(self)
            if newer:
                raise ValueError(f"{', '.join(newer)}: format 2 keys; set format = 2 to use them")
        return self

    def digest(self) -> str:
        """``sha256:`` of the profile's content (comments and layout do not count)."""
        return digest_of(self.model_dump(mode="json"))


def format_2_keys(profile: DeviceProfile) -> list[str]:
    """The keys of ``profile`` that only format 2 knows, set to anything but their
    default (a format 1 profile has none)."""
    checks = {
        "auth.kind": profile.auth.kind != "token",
        "requests.submit.handle_from": profile.requests.submit.handle_from != "answer",
        "requests.submit.handle_part": profile.requests.submit.handle_part != "last_segment",
        "requests.submit.repeats": profile.requests.submit.repeats != "same",
        "requests.submit.body_format": profile.requests.submit.body_format != "json",
        "requests.submit.program": profile.requests.submit.program != "openqasm2",
        "results.samples": profile.results.samples is not None,
        "results.bit_order": profile.results.bit_order != "ours",
        "results.encoding": profile.results.encoding != "bitstrings",
        "results.pages": profile.results.pages is not None,
    }
    return [key for key, used in checks.items() if used]


def _describe(exc: ValidationError) -> str:
    lines = []
    for error in exc.errors():
        where = ".".join(str(part) for part in error["loc"]) or "(top level)"
        message = str(error["msg"]).removeprefix("Value error, ")
        lines.append(f"{where}: {message}")
    # one line, as every usage or configuration error is reported
    return "; ".join(lines)


def parse_profile(data: dict[str, Any], *, source: str = "<profile>") -> DeviceProfile:
    """A validated profile from parsed TOML; a :class:`ConfigError` lists every problem."""
    try:
        return DeviceProfile.model_validate(data)
    except ValidationError as exc:
        raise ConfigError(f"device profile {source} is invalid: {_describe(exc)}") from None


def shipped_profiles() -> list[str]:
    """Names of the profiles shipped in ``jobkeeper/profiles/``."""
    folder = resources.files("jobkeeper").joinpath("profiles")
    return sorted(
        entry.name.removesuffix(".toml")
        for entry in folder.iterdir()
        if entry.name.endswith(".toml")
    )


def load_profile(ref: str = DEFAULT_PROFILE) -> DeviceProfile:
    """A profile by shipped name (``"loopback"``) or by path to a TOML file (anything with
    a ``/`` or ending in ``.toml``; relative paths are taken from the current directory)."""
    if "/" in ref or "\\" in ref or ref.endswith(".toml"):
        path = Path(ref).expanduser()
        try:
            text = path.read_text(encoding="utf-8")
        except OSError as exc:
            raise ConfigError(f"cannot read device profile {ref}: {exc.strerror}") from None
        except UnicodeDecodeError as exc:
            raise ConfigError(f"device profile {ref} is not UTF-8 text: {exc.reason}") from None
        source = str(path)
    else:
        entry = resources.files("jobkeeper").joinpath("profiles", f"{ref}.toml")
        if not entry.is_file():
            raise ConfigError(
                f"no shipped device profile {ref!r}; shipped: {', '.join(shipped_profiles())}"
                " (or give the path of a TOML file)"
            )
        text = entry.read_text(encoding="utf-8")
        source = f"{ref!r} (shipped)"
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"device profile {source} is not valid TOML: {exc}") from None
    except RecursionError:  # tomllib recurses once per level of nesting
        raise ConfigError(f"device profile {source} is nested too deeply") from None
    return parse_profile(data, source=source)
