"""The backend registry: resolves a backend's name and configuration to an instance.

Backends come from two places only: the built-in adapters (imported lazily, on first
use) and the entry-point group ``jobkeeper.backends``, where a third-party package
registers a factory. A factory is called as ``factory(name, config)`` and must return an
object implementing :class:`jobkeeper.backend.Backend`; anything else is a configuration
error. Only this registry and the command line resolve names; library code takes
backend instances (or asks this registry for one, as :func:`ideal_simulator`).
"""

from __future__ import annotations

import inspect
from collections.abc import Callable, Mapping
from importlib.metadata import entry_points
from typing import Any

from jobkeeper.backend import Backend, LocalBackend
from jobkeeper.exceptions import ConfigError, JobkeeperError

BackendFactory = Callable[[str, Mapping[str, Any]], Backend]

ENTRY_POINT_GROUP = "jobkeeper.backends"

#: backends every keep has without any configuration: name → config.
DEFAULT_BACKENDS: dict[str, dict[str, Any]] = {
    "statevector": {"adapter": "statevector"},
}


def _statevector() -> BackendFactory:
    from jobkeeper.backends.sim.statevector import from_config

    return from_config


def _densitymatrix() -> BackendFactory:
    from jobkeeper.backends.sim.densitymatrix import from_config

    return from_config


def _trajectories() -> BackendFactory:
    from jobkeeper.backends.sim.trajectories import from_config

    return from_config


def _rest() -> BackendFactory:
    from jobkeeper.backends.rest.adapter import from_config

    return from_config


#: adapter name → a loader of its factory. The imports sit inside the loaders so that
#: naming a backend costs nothing until it is used.
BUILTIN_ADAPTERS: dict[str, Callable[[], BackendFactory]] = {
    "statevector": _statevector,
    "densitymatrix": _densitymatrix,
    "trajectories": _trajectories,
    "rest": _rest,
}

#: what a Backend must have (jobkeeper.backend.Backend's members).
_BACKEND_MEMBERS = ("info", "start", "poll", "cancel", "aclose")


def adapter_names() -> list[str]:
    """Every adapter name that can be used in a backend's ``adapter`` key."""
    names = set(BUILTIN_ADAPTERS)
    names.update(ep.name for ep in entry_points(group=ENTRY_POINT_GROUP))
    return sorted(names)


def resolve_factory(adapter: str) -> BackendFactory:
    """The factory of an adapter: a built-in one, else one registered under the
    entry-point group ``jobkeeper.backends``. Raises ConfigError for anything else."""
    if adapter in BUILTIN_ADAPTERS:
        try:
            return BUILTIN_ADAPTERS[adapter]()
        except ImportError as exc:
            raise ConfigError(f"backend adapter {adapter!r} cannot be loaded: {exc}") from exc
    for ep in entry_points(group=ENTRY_POINT_GROUP):
        if ep.name == adapter:
            try:
                factory = ep.load()
            except Exception as exc:  # a third party's import error of any kind
                raise ConfigError(
                    f"backend adapter {adapter!r} ({ep.value}) cannot be loaded: {_one_line(exc)}"
                ) from exc
            if not callable(factory):
                raise ConfigError(
                    f"backend adapter {adapter!r} ({ep.value}) is not a backend factory"
                )
            return factory  # type: ignore[no-any-return]
    raise ConfigError(
        f"unknown backend adapter {adapter!r}; known adapters: {', '.join(adapter_names())}"
    )


def is_backend(candidate: object) -> bool:
    """Whether ``candidate`` has every member of :class:`Backend`, looked up without
    running them (``isinstance`` on the protocol would evaluate ``info``, which may do
    work)."""
    return all(_has_static(candidate, member) for member in _BACKEND_MEMBERS) and all(
        callable(getattr(candidate, m)) for m in _BACKEND_MEMBERS if m != "info"
    )


def _one_line(exc: BaseException) -> str:
    """A third party's exception as one line of a usage error."""
    text = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


def _has_static(candidate: object, member: str) -> bool:
    try:
        inspect.getattr_static(candidate, member)
    except AttributeError:
        return False
    return True


def create_backend(name: str, config: Mapping[str, Any] | None = None) -> Backend:
    """An instance of the backend called ``name``, configured by ``config`` (whose
    ``adapter`` key picks the adapter; it defaults to ``name`` itself)."""
    config = dict(config or DEFAULT_BACKENDS.get(name, {}))
    adapter = config.get("adapter", name)
    if not isinstance(adapter, str):
        raise ConfigError(f"backend {name!r}: adapter must be a name, got {adapter!r}")
    factory = resolve_factory(adapter)
    try:
        backend: object = factory(name, config)
    except JobkeeperError:
        raise
    except Exception as exc:  # a third-party factory's own failure
        raise ConfigError(
            f"backend {name!r}: adapter {adapter!r} failed to build it: {_one_line(exc)}"
        ) from exc
    if not is_backend(backend):
        raise ConfigError(
            f"backend {name!r}: adapter {adapter!r} returned a {type(backend).__name__}, "
            "not a backend (it needs info, start, poll, cancel and aclose)"
        )
    return backend  # type: ignore[return-value]


def ideal_simulator() -> LocalBackend:
    """The noiseless simulator with its default configuration, for library code that
    needs exact ideal distributions (a run judged against theory, the loopback device's
    answers) without importing an adapter."""
    backend = create_backend("statevector", DEFAULT_BACKENDS["statevector"])
    assert isinstance(backend, LocalBackend)  # the built-in state-vector simulator is local
    return backend
