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
from typing import Annotated, Any, Literal

from pydantic import AfterValidator, BaseModel, ConfigDict, Field, ValidationError, model_validator

from jobkeeper.backend import RemoteState
from jobkeeper.backends.rest.wire import (
    BODY_FIELDS,
    PATH_FIELDS,
    PointerError,
    pointer_tokens,
    template_fields,
    template_strings,
)
from jobkeeper.exceptions import ConfigError
from jobkeeper.hashing import digest_of

PROFILE_FORMAT: Literal[1] = 1
DEFAULT_PROFILE = "loopback"


def _check_pointer(value: str) -> str:
    try:
        pointer_tokens(value)
    except PointerError as exc:
        raise ValueError(str(exc)) from None
    return value


#: a JSON Pointer (RFC 6901) into a device's JSON answer; "" is the whole answer.
Pointer = Annotated[str, AfterValidator(_check_pointer)]

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


class AuthSpec(_Model):
    """The header that carries the token: ``header: scheme token`` (``scheme = ""`` sends
    the bare token)."""

    header: str = Field(default="Authorization", min_length=1)
    scheme: str = "Bearer"


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
        if not self.path.startswith("/"):
            raise ValueError(f"path {self.path!r} must start with '/'")
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
    """The submission. ``handle`` locates the device's job id in the answer."""

    method: HttpMethod = "POST"
    handle: Pointer

    @model_validator(mode="after")
    def _check_submit(self) -> SubmitSpec:
        if self.path_fields():
            raise ValueError("the submit path cannot hold {handle}: there is no job yet")
        names = {n for text in template_strings(self.body or {}) for n in template_fields(text)}
        if "circuit" not in names:
            raise ValueError("the submit body must send the circuit: put {circuit} in it")
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


class ResultsSpec(_Model):
    """Where the outcome sits: in the result answer, or in the status answer when the
    profile has no result request. ``bit_order = "ours"``: bit strings are written as
    jobkeeper writes them (OpenQASM 2 convention, c[0] rightmost, registers separated by
    one space, the last declared leftmost)."""

    counts: Pointer
    probabilities: Pointer | None = None
    metadata: Pointer | None = None
    bit_order: Literal["ours"] = "ours"


class DeviceProfile(_Model):
    """A whole profile file."""

    format: Literal[1] = PROFILE_FORMAT
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

    def digest(self) -> str:
        """``sha256:`` of the profile's content (comments and layout do not count)."""
        return digest_of(self.model_dump(mode="json"))


def _describe(exc: ValidationError) -> str:
    lines = []
    for error in exc.errors():
        where = ".".join(str(part) for part in error["loc"]) or "(top level)"
        message = str(error["msg"]).removeprefix("Value error, ")
        lines.append(f"  {where}: {message}")
    return "\n".join(lines)


def parse_profile(data: dict[str, Any], *, source: str = "<profile>") -> DeviceProfile:
    """A validated profile from parsed TOML; a :class:`ConfigError` lists every problem."""
    try:
        return DeviceProfile.model_validate(data)
    except ValidationError as exc:
        raise ConfigError(f"device profile {source} is invalid:\n{_describe(exc)}") from None


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
