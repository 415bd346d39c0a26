"""The backend registry: resolves a backend's name and configuration to an instance.

Built-in adapters are imported lazily, on first use; third-party adapters register a
factory under the entry-point group ``jobkeeper.backends``. A factory is called as
``factory(name, config)`` and returns an object implementing
:class:`jobkeeper.backend.Backend`. Only this registry and the command line resolve
names; library code takes backend instances.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping
from importlib.metadata import entry_points
from typing import Any

from jobkeeper.backend import Backend
from jobkeeper.exceptions import ConfigError

BackendFactory = Callable[[str, Mapping[str, Any]], Backend]

#: adapter name → "module:factory" of the built-in adapters.
BUILTIN_ADAPTERS: dict[str, str] = {
    "statevector": "jobkeeper.backends.sim.statevector:from_config",
    "densitymatrix": "jobkeeper.backends.sim.densitymatrix:from_config",
    "rest": "jobkeeper.backends.rest.adapter:from_config",
}

#: backends every keep has without any configuration: name → config.
DEFAULT_BACKENDS: dict[str, dict[str, Any]] = {
    "statevector": {"adapter": "statevector"},
}

ENTRY_POINT_GROUP = "jobkeeper.backends"


def _load(target: str) -> BackendFactory:
    module_name, _, attr = target.partition(":")
    module = importlib.import_module(module_name)
    factory: BackendFactory = getattr(module, attr)
    return factory


def adapter_names() -> list[str]:
    """Every adapter name that can be used in a backend's ``adapter`` key."""
    names = set(BUILTIN_ADAPTERS)
    names.update(ep.name for ep in entry_points(group=ENTRY_POINT_GROUP))
    return sorted(names)


def resolve_factory(adapter: str) -> BackendFactory:
    """The factory of an adapter: built-in first, then the entry points, then a
    ``module:factory`` path (for a user's own adapter that is not packaged)."""
    if adapter in BUILTIN_ADAPTERS:
        try:
            return _load(BUILTIN_ADAPTERS[adapter])
        except ImportError as exc:
            raise ConfigError(f"backend adapter {adapter!r} cannot be loaded: {exc}") from exc
    if ":" in adapter:
        try:
            return _load(adapter)
        except (ImportError, AttributeError) as exc:
            raise ConfigError(f"cannot load backend adapter {adapter!r}: {exc}") from exc
    for ep in entry_points(group=ENTRY_POINT_GROUP):
        if ep.name == adapter:
            factory: BackendFactory = ep.load()
            return factory
    raise ConfigError(
        f"unknown backend adapter {adapter!r}; known adapters: {', '.join(adapter_names())}"
    )


def create_backend(name: str, config: Mapping[str, Any] | None = None) -> Backend:
    """An instance of the backend called ``name``, configured by ``config`` (whose
    ``adapter`` key picks the adapter; it defaults to ``name`` itself)."""
    config = dict(config or DEFAULT_BACKENDS.get(name, {}))
    adapter = str(config.get("adapter", name))
    return resolve_factory(adapter)(name, config)
