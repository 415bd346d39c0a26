"""What a user asks for when submitting (:class:`SubmitOptions`), checked once.

The command line and the Python API both hand their options to this one model, so a
value that one refuses the other refuses too, with the same message. Whatever the model
accepts is final: :class:`~jobkeeper.spec.JobSpec` and the worker take it as given.
Backend-specific limits (a device's largest shot count) are checked where the backend
is known, by :meth:`jobkeeper.Keeper.submit` and ``check``.
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterable, Mapping, Sequence
from typing import Any, TypedDict

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from jobkeeper.exceptions import ConfigError
from jobkeeper.spec import SEED_BITS

#: The longest label: long enough for a figure or a run name, short enough for a table.
MAX_LABEL = 100


def positive_seconds(value: float | None, what: str = "timeout") -> float | None:
    """A time limit: None (no limit) or a positive, finite number of seconds."""
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(f"{what} must be a number of seconds, got {value!r}")
    if not (math.isfinite(value) and value > 0):
        raise ConfigError(f"{what} must be a positive number of seconds, got {value}")
    return float(value)


class SubmitFields(TypedDict, total=False):
    """The keyword arguments of :meth:`jobkeeper.Keeper.submit` and ``run``: the fields of
    :class:`SubmitOptions` (a test keeps the two in step)."""

    backend: str | None
    shots: int | None
    seed: int | None
    repeat: int
    labels: Iterable[str] | str
    exact: bool
    backend_options: Mapping[str, Any]
    over_budget: bool
    timeout: float | None
    code_dir: str | os.PathLike[str] | None
    inputs: Sequence[str]


class SubmitOptions(BaseModel):
    """How to run the circuits of one submission. ``None`` means the keep's default
    (config.toml ``[defaults]``) for ``backend`` and ``shots``."""

    model_config = ConfigDict(frozen=True, extra="forbid", arbitrary_types_allowed=True)

    backend: str | None = None
    shots: int | None = Field(default=None, strict=True)
    #: the seed asked for; None lets jobkeeper choose one (recorded, see JobSpec.seed)
    seed: int | None = Field(default=None, strict=True)
    #: ask on purpose for another sample of the same job
    repeat: int = Field(default=0, strict=True)
    labels: frozenset[str] = frozenset()
    exact: bool = Field(default=False, strict=True)
    backend_options: dict[str, Any] = Field(default_factory=dict)
    #: submit even if a spending cap would be passed
    over_budget: bool = Field(default=False, strict=True)
    #: how long ``run`` waits for its jobs, seconds (None: until they end)
    timeout: float | None = None
    #: where the user's code lives, for its git commit in the manifest (default: cwd)
    code_dir: str | None = None
    #: ``NAME=VALUE`` values for the programs' ``input`` parameters (``--set``)
    inputs: tuple[str, ...] = ()

    @field_validator("backend")
    @classmethod
    def _backend(cls, value: str | None) -> str | None:
        if value is not None and not value.strip():
            raise ValueError("backend must be a backend's name, got an empty string")
        return value

    @field_validator("shots")
    @classmethod
    def _shots(cls, value: int | None) -> int | None:
        if value is not None and value < 1:
            raise ValueError(f"shots must be a positive whole number, got {value}")
        return value

    @field_validator("seed")
    @classmethod
    def _seed(cls, value: int | None) -> int | None:
        if value is not None and not 0 <= value < 2**SEED_BITS:
            raise ValueError(f"seed must be a whole number from 0 to 2^63-1, got {value}")
        return value

    @field_validator("repeat")
    @classmethod
    def _repeat(cls, value: int) -> int:
        if value < 0:
            raise ValueError(f"repeat must be zero or a positive whole number, got {value}")
        return value

    @field_validator("labels", mode="before")
    @classmethod
    def _labels(cls, value: Any) -> frozenset[str]:
        # A lone string is one label, not a set of its characters.
        items = [value] if isinstance(value, str) else list(value or ())
        labels = set()
        for item in items:
            if not isinstance(item, str) or not item.strip():
                raise ValueError(f"a label must be a non-empty string, got {item!r}")
            if len(item) > MAX_LABEL or not item.isprintable():
                raise ValueError(
                    f"a label must be printable and at most {MAX_LABEL} characters: {item!r}"
                )
            labels.add(item)
        return frozenset(labels)

    @field_validator("timeout", mode="before")
    @classmethod
    def _timeout(cls, value: Any) -> float | None:
        try:
            return positive_seconds(value)
        except ConfigError as exc:
            raise ValueError(str(exc)) from None

    @field_validator("inputs", mode="before")
    @classmethod
    def _inputs(cls, value: Any) -> tuple[str, ...]:
        # A lone string is one setting, not a sequence of its characters.
        items = [value] if isinstance(value, str) else list(value or ())
        if not all(isinstance(item, str) for item in items):
            raise ValueError("inputs must be NAME=VALUE strings")
        return tuple(items)

    @field_validator("code_dir", mode="before")
    @classmethod
    def _code_dir(cls, value: Any) -> str | None:
        return None if value is None else os.fspath(value)

    @classmethod
    def of(cls, options: SubmitOptions | None = None, /, **fields: Any) -> SubmitOptions:
        """Options from keyword fields (over ``options``, when given); a value that does
        not hold raises ConfigError with one line naming it."""
        values = {} if options is None else options.model_dump()
        values.update(fields)
        try:
            return cls.model_validate(values)
        except ValidationError as exc:
            raise ConfigError(_first_problem(exc)) from None


def _first_problem(exc: ValidationError) -> str:
    error = exc.errors()[0]
    message = str(error["msg"]).removeprefix("Value error, ")
    where = ".".join(str(part) for part in error["loc"])
    if error["type"] == "extra_forbidden":
        return f"unknown option {where!r}"
    if message.startswith(where.split(".")[0]) or message.startswith("a label"):
        return message
    return f"{where}: {message}, got {error.get('input')!r}"
