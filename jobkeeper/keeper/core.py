"""The keep's core: its parts (store, configuration, signing keys) and its backends,
resolved by name, with a simulator's noise taken from another backend's calibration
(``noise_from``). The base of :class:`jobkeeper.Keeper`."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any, Self

from jobkeeper.config import KeepConfig, backend_configs
from jobkeeper.exceptions import ConfigError
from jobkeeper.outputs import guarded_paths
from jobkeeper.provenance.keys import KeyRing
from jobkeeper.store import Store

if TYPE_CHECKING:
    from jobkeeper.backend import Backend, BackendInfo
    from jobkeeper.probing import ProbeReport


class KeepCore:
    """One keep's parts and backends."""

    def __init__(self, *, path: Path, store: Store, config: KeepConfig, keyring: KeyRing) -> None:
        self.path = path
        self.store = store
        self.config = config
        self.keyring = keyring
        self._backends: dict[str, Backend] = {}

    def close(self) -> None:
        self.store.close()

    def guarded_paths(self) -> tuple[Path, ...]:
        """What no output file may be written into or over: this keep and its archive."""
        location = self.store.location
        database = None if "://" in location else Path(location)
        return guarded_paths(self.path, database)

    def _trusted_keys(self) -> dict[str, bytes]:
        """The keys whose signatures count here: every read of a result is checked
        against its signed manifest with them (:mod:`jobkeeper.audit.reading`)."""
        from jobkeeper.audit.trust import load_trust

        return load_trust(self.path, self.keyring).keys

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # -- backends -------------------------------------------------------------------------

    def backend_configs(self) -> dict[str, dict[str, Any]]:
        from jobkeeper.backends import DEFAULT_BACKENDS

        return backend_configs(self.config, self.path, DEFAULT_BACKENDS)

    def backend(self, name: str) -> Backend:
        """The backend called ``name`` (built in, or declared in config.toml)."""
        if name not in self._backends:
            configs = self.backend_configs()
            if name not in configs:
                known = ", ".join(sorted(configs))
                raise ConfigError(f"unknown backend {name!r}; known backends: {known}")
            from jobkeeper.backends import create_backend

            config = self._noise_source(name, configs[name], configs)
            self._backends[name] = create_backend(name, config)
        return self._backends[name]

    def _noise_source(
        self, name: str, config: dict[str, Any], configs: Mapping[str, Mapping[str, Any]]
    ) -> dict[str, Any]:
        """A simulator declared with ``noise_from = "SOURCE"`` gets SOURCE's calibration
        snapshot as ``noise_snapshot``: the latest one archived with a finished job of
        SOURCE, or with ``noise_refresh = true`` one fetched now (the snapshot's own
        ``fetched_at`` says when)."""
        source = config.get("noise_from")
        if source is None:
            return config
        if not isinstance(source, str) or source == name or source not in configs:
            known = ", ".join(sorted(n for n in configs if n != name))
            raise ConfigError(
                f"backend {name!r}: noise_from = {source!r} names no other backend of this "
                f"keep (known: {known})"
            )
        if config.get("noise_refresh") is True:
            snapshot = self._fetch_calibration(source, configs[source])
            if snapshot is not None:
                snapshot = {**snapshot, "live": True}
        else:
            snapshot = self._latest_calibration(source)
        if snapshot is None:
            raise ConfigError(
                f"backend {name!r}: no calibration snapshot of {source!r} is archived yet; run "
                f"a job on {source!r} first, or set noise_refresh = true to fetch one now"
            )
        return {**config, "noise_snapshot": snapshot}

    def _latest_calibration(self, source: str) -> dict[str, Any] | None:
        done = [job for job in self.store.list_jobs(state="done") if job.spec.backend == source]
        for job in sorted(done, key=lambda j: j.finished_at or 0.0, reverse=True):
            result = self.store.result(job.id)
            snapshot = None if result is None else result.metadata.get("calibration")
            if isinstance(snapshot, Mapping):
                return dict(snapshot)
        return None

    def _fetch_calibration(self, source: str, config: Mapping[str, Any]) -> dict[str, Any] | None:
        from jobkeeper.backends import create_backend

        async def fetch() -> Any:
            # A backend of its own for the fetch: its HTTP client lives on this loop only.
            backend = create_backend(source, config)
            try:
                refresh = getattr(backend, "refresh_calibration", None)
                if not callable(refresh):
                    raise ConfigError(f"backend {source!r} has no calibration to fetch")
                return await refresh(force=True)
            finally:
                await backend.aclose()

        from jobkeeper._execution import run_coroutine

        snapshot = run_coroutine(fetch())
        return dict(snapshot) if isinstance(snapshot, Mapping) else None

    def probe(self, name: str) -> ProbeReport:
        """Probe backend ``name`` without submitting work: is its device reachable, does
        it take the credentials (a token request included), can its calibration be read,
        and what its profile declares. A local simulator has nothing to reach."""
        from jobkeeper._execution import run_coroutine
        from jobkeeper.backends import create_backend
        from jobkeeper.probing import Probeable, local_report

        configs = self.backend_configs()
        if name not in configs:
            known = ", ".join(sorted(configs))
            raise ConfigError(f"unknown backend {name!r}; known backends: {known}")

        async def probe() -> ProbeReport:
            # A backend of its own: its HTTP client lives on this loop only.
            backend = create_backend(name, configs[name])
            try:
                if isinstance(backend, Probeable):
                    return await backend.probe()
                return local_report(backend.info)
            finally:
                await backend.aclose()

        report: ProbeReport = run_coroutine(probe())
        return report

    def backend_infos(self) -> list[BackendInfo]:
        return [self.backend(name).info for name in sorted(self.backend_configs())]
