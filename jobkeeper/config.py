"""The keep directory and its ``config.toml``.

A keep holds everything of one archive: ``archive.db`` (the SQLite store, unless the
config or ``--store`` names a PostgreSQL URL), ``config.toml`` (backends, budgets,
defaults) and ``keys/`` (the signing keys). The command line finds it with ``--keep`` or
``JOBKEEPER_KEEP`` (default ``./.jobkeeper``); the library is always told the path.
"""

from __future__ import annotations

import json
import tomllib
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from jobkeeper.exceptions import BudgetExceeded, ConfigError
from jobkeeper.queue import PollPolicy, RetryPolicy

DEFAULT_KEEP = Path(".jobkeeper")
CONFIG_NAME = "config.toml"
ARCHIVE_NAME = "archive.db"
KEYS_DIR = "keys"

CONFIG_TEMPLATE = """\
# jobkeeper keep configuration. Every key is optional.

[defaults]
shots = 1024
max_attempts = 10

# Back-off of transient failures: uniform(0, min(cap, base * 2^attempt)) seconds; a delay
# the backend asks for wins. Polling of remote jobs: first, then *factor, up to cap.
# [retry]
# base = 2.0
# cap = 900.0
# [poll]
# first = 2.0
# factor = 1.5
# cap = 60.0

# Spending caps, in the currency of the backends' pricing. 'submit' refuses a job that
# would pass one (unless --over-budget) and says how much is left.
# [budget]
# total = 100.0
# [budget.labels]
# my-label = 20.0

# Backends beyond the built-in 'statevector'. Examples:
# [backends.noisy]
# adapter = "densitymatrix"
# depolarizing_1q = 0.001
# depolarizing_2q = 0.01
# readout_error = 0.02
#
# [backends.rehearsal]
# adapter = "rest"
# profile = "loopback"
# url = "http://127.0.0.1:8765"
# token_env = "JOBKEEPER_LOOPBACK_TOKEN"
"""


class Defaults(BaseModel):
    model_config = ConfigDict(extra="forbid")

    shots: int = Field(default=1024, ge=1)
    max_attempts: int = Field(default=10, ge=1)
    backend: str = "statevector"


class Budget(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)

    total: float | None = Field(default=None, ge=0)
    labels: dict[str, float] = Field(default_factory=dict)

    def check(
        self, cost: float, labels: Iterable[str], spent: Callable[[str | None], float]
    ) -> None:
        """Refuse (BudgetExceeded) a cost that would pass the keep-wide cap or the cap of
        one of ``labels``; ``spent(label)`` is what was spent (under a label, or in all)."""
        if cost <= 0:
            return
        caps: list[tuple[str, float, str | None]] = []
        if self.total is not None:
            caps.append(("the keep's budget", self.total, None))
        for label in sorted(set(labels) & set(self.labels)):
            caps.append((f"the budget of label {label!r}", self.labels[label], label))
        for what, cap, scope in caps:
            left = cap - spent(scope)
            if cost > left + 1e-12:
                raise BudgetExceeded(
                    f"this submission would cost {cost:.4g} but {what} has {max(left, 0):.4g} "
                    f"left of {cap:.4g}; nothing was queued (use --over-budget to submit anyway)"
                )


class KeepConfig(BaseModel):
    model_config = ConfigDict(extra="forbid")

    store: str | None = None
    defaults: Defaults = Field(default_factory=Defaults)
    retry: RetryPolicy = Field(default_factory=RetryPolicy)
    poll: PollPolicy = Field(default_factory=PollPolicy)
    budget: Budget = Field(default_factory=Budget)
    backends: dict[str, dict[str, Any]] = Field(default_factory=dict)


def load_config(keep: Path) -> KeepConfig:
    path = keep / CONFIG_NAME
    if not path.exists():
        return KeepConfig()
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise ConfigError(f"{path}: cannot read the configuration: {exc}") from exc
    except RecursionError:
        # tomllib parses nested arrays and tables recursively: a hostile or broken file
        # nested some thousand levels deep exhausts the stack instead of failing to parse.
        raise ConfigError(f"{path}: cannot read the configuration: nested too deeply") from None
    try:
        return KeepConfig.model_validate(data)
    except ValidationError as exc:
        first = exc.errors()[0]
        where = ".".join(str(part) for part in first["loc"])
        raise ConfigError(f"{path}: {where}: {first['msg']}") from exc


def config_text(store: str | None) -> str:
    """A new keep's config.toml; a store URL given at creation is remembered there, so
    later commands need no --store (a URL holding a password is not written down)."""
    if store is None:
        return CONFIG_TEMPLATE
    from urllib.parse import urlsplit

    if urlsplit(store).password:
        return CONFIG_TEMPLATE.replace(
            "# jobkeeper keep configuration.",
            "# jobkeeper keep configuration. Its store URL holds a password, so it is not\n"
            "# written here: pass --store or set JOBKEEPER_STORE (or use ~/.pgpass).\n#",
        )
    return f"store = {json.dumps(store)}\n\n" + CONFIG_TEMPLATE


def create_keep_dir(keep: Path) -> None:
    """Make the keep directory, and prove it can be written before anything goes in."""
    try:
        keep.mkdir(parents=True, exist_ok=True)
        probe = keep / ".write-test"
        probe.write_text("")
        probe.unlink()
    except OSError as exc:
        raise ConfigError(f"cannot write the keep directory {keep}: {exc.strerror}") from exc


def write_config(path: Path, text: str) -> None:
    try:
        path.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise ConfigError(f"cannot write {path}: {exc.strerror}") from exc


def backend_configs(config: KeepConfig, keep: Path, built_in: dict[str, Any]) -> dict[str, Any]:
    """Every backend's config table: the built-in ones, then config.toml's. A profile
    given as a relative path means relative to the keep, not to wherever the command
    happens to run."""
    configs = {name: dict(cfg) for name, cfg in built_in.items()}
    configs.update({name: dict(cfg) for name, cfg in config.backends.items()})
    for cfg in configs.values():
        profile = cfg.get("profile")
        if isinstance(profile, str) and profile.endswith(".toml"):
            path = Path(profile).expanduser()
            cfg["profile"] = str(path if path.is_absolute() else keep.resolve() / path)
    return configs
