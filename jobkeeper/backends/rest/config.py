"""The ``[backends.NAME]`` table of a REST device, validated.

Tokens never live in configuration: ``token_env`` names the environment variable that
holds one, and keys that look like a secret are refused with a message saying so.
"""

from __future__ import annotations

import ipaddress
import re
from collections.abc import Mapping
from typing import Any, Literal

import httpx
from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from jobkeeper.backend import Pricing
from jobkeeper.backends.rest.http import (
    DEFAULT_IN_CALL_RETRY,
    DEFAULT_MAX_ANSWER,
    InCallRetry,
    Timeouts,
)
from jobkeeper.exceptions import ConfigError

_SECRET_KEYS = re.compile(r"token|secret|password|api_?key|credential", re.IGNORECASE)
_ENV_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")


class _Table(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class TimeoutTable(_Table):
    connect: float = Field(default=5.0, gt=0)
    read: float = Field(default=30.0, gt=0)
    write: float = Field(default=30.0, gt=0)
    pool: float = Field(default=10.0, gt=0)


class PricingTable(_Table):
    per_task: float = Field(default=0.0, ge=0)
    per_shot: float = Field(default=0.0, ge=0)
    currency: str = "credits"


class RetryTable(_Table):
    attempts: int = Field(default=DEFAULT_IN_CALL_RETRY.attempts, ge=1, le=10)
    first_wait: float = Field(default=DEFAULT_IN_CALL_RETRY.first_wait, ge=0, le=60)
    max_wait: float = Field(default=DEFAULT_IN_CALL_RETRY.max_wait, ge=0, le=60)


def is_loopback_host(host: str) -> bool:
    """True for ``localhost`` and loopback addresses (127.0.0.0/8, ::1)."""
    if host.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


class RestConfig(_Table):
    adapter: Literal["rest"] = "rest"
    profile: str = Field(default="loopback", min_length=1)
    url: str
    #: the variable holding a static token (profiles with auth kind "token")
    token_env: str | None = None
    #: the variables holding the OAuth client id and secret (kind "client_credentials")
    client_id_env: str | None = None
    client_secret_env: str | None = None
    timeout: float | TimeoutTable | None = None
    max_connections: int = Field(default=10, ge=1, le=1000)
    #: the largest answer read from the device, in bytes (1 KiB to 1 GiB)
    max_answer: int = Field(default=DEFAULT_MAX_ANSWER, ge=1024, le=2**30)
    max_qubits: int | None = Field(default=None, ge=1)
    pricing: PricingTable | None = None
    retry: RetryTable | None = None
    ca_file: str | None = None
    trust_env: bool = False

    @field_validator("url")
    @classmethod
    def _check_url(cls, url: str) -> str:
        try:
            parsed = httpx.URL(url)
        except httpx.InvalidURL as exc:
            raise ValueError(f"not a URL: {exc}") from None
        if parsed.scheme == "https" and parsed.host:
            return url
        if parsed.scheme == "http" and is_loopback_host(parsed.host):
            return url
        raise ValueError(
            "must be https://... (plain http:// is allowed only for a loopback address, "
            "since the token travels with every request)"
        )

    @field_validator("token_env", "client_id_env", "client_secret_env")
    @classmethod
    def _check_env_name(cls, name: str | None) -> str | None:
        if name is not None and not _ENV_NAME.fullmatch(name):
            raise ValueError("must be the NAME of an environment variable, e.g. MY_DEVICE_TOKEN")
        return name

    @field_validator("timeout")
    @classmethod
    def _check_timeout(cls, value: float | TimeoutTable | None) -> float | TimeoutTable | None:
        if isinstance(value, float | int) and value <= 0:
            raise ValueError("must be a positive number of seconds")
        return value

    def timeouts(self) -> Timeouts:
        if self.timeout is None:
            return Timeouts()
        if isinstance(self.timeout, TimeoutTable):
            return Timeouts(**self.timeout.model_dump())
        return Timeouts.total(float(self.timeout))

    def in_call_retry(self) -> InCallRetry:
        return InCallRetry(**self.retry.model_dump()) if self.retry else DEFAULT_IN_CALL_RETRY

    def pricing_value(self) -> Pricing | None:
        return Pricing(**self.pricing.model_dump()) if self.pricing else None


def parse_config(name: str, config: Mapping[str, Any]) -> RestConfig:
    """The validated table, or a :class:`ConfigError` naming each problem (never a value:
    a misplaced token must not be echoed)."""
    for key in config:
        if not str(key).endswith("_env") and _SECRET_KEYS.search(str(key)):
            raise ConfigError(
                f"backend {name!r}: key {key!r} looks like a secret; secrets never go in the "
                "configuration: put the token in an environment variable and set token_env "
                "(or client_secret_env) to that variable's NAME"
            )
    try:
        return RestConfig.model_validate(dict(config))
    except ValidationError as exc:
        problems = "\n".join(
            f"  {'.'.join(str(p) for p in err['loc']) or '(table)'}: "
            + str(err["msg"]).removeprefix("Value error, ")
            for err in exc.errors()
        )
        raise ConfigError(
            f"backend {name!r} (adapter rest) is misconfigured:\n{problems}"
        ) from None
