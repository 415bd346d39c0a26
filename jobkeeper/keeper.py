"""The Python API: :class:`Keeper` (one keep) and :class:`Job` (one job in it).

Everything the command line does goes through here, so a notebook can do it too::

    from jobkeeper import Keeper
    keeper = Keeper.open(".jobkeeper")
    job = keeper.run("bell.qasm", shots=1000, seed=7)
    job.counts
"""

from __future__ import annotations

import asyncio
import concurrent.futures
import json
import os
import time
import uuid
from collections.abc import Callable, Coroutine, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, TypeAlias, TypeVar

from jobkeeper.config import (
    ARCHIVE_NAME,
    CONFIG_NAME,
    CONFIG_TEMPLATE,
    DEFAULT_KEEP,
    KEYS_DIR,
    KeepConfig,
    load_config,
)
from jobkeeper.exceptions import (
    BudgetExceeded,
    ConfigError,
    JobFailed,
    JobkeeperError,
    StoreUnavailable,
)
from jobkeeper.provenance.keys import KeyRing
from jobkeeper.queue import DEFAULT_LEASE, TERMINAL_STATES, LeasePolicy, RetryPolicy
from jobkeeper.store import (
    Attempt,
    JobRecord,
    LogEntry,
    NewJob,
    Store,
    StoredResult,
    open_store,
)

# Signing, simulating and parsing load numpy, cryptography and the backends: imported
# where they are used, so that opening a keep to read it (`jobkeeper jobs`) stays quick.
if TYPE_CHECKING:
    from jobkeeper.audit.sealing import Sealer
    from jobkeeper.audit.trust import KeepTrust
    from jobkeeper.backend import Backend, BackendInfo
    from jobkeeper.circuit import Circuit
    from jobkeeper.store.export import ExportSummary
    from jobkeeper.worker import Worker, WorkerStats

T = TypeVar("T")
CircuitInput: TypeAlias = "str | os.PathLike[str] | Circuit"


def _config_text(store: str | None) -> str:
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


def run_coroutine(coro: Coroutine[Any, Any, T]) -> T:
    """Run a coroutine to the end, also from inside a running event loop (a notebook):
    there it runs on a fresh loop in a helper thread."""
    try:
        asyncio.get_running_loop()
    except RuntimeError:
        return asyncio.run(coro)
    with concurrent.futures.ThreadPoolExecutor(max_workers=1) as pool:
        return pool.submit(asyncio.run, coro).result()


@dataclass(frozen=True)
class Submitted:
    """What ``submit`` did with one job: created it, or found it already there."""

    job: Job
    deduplicated: bool


class Job:
    """A job in a keep. Attributes read the archive afresh after :meth:`refresh`."""

    def __init__(self, keeper: Keeper, record: JobRecord) -> None:
        self._keeper = keeper
        self.record = record

    def __repr__(self) -> str:
        return f"<Job {self.id[:12]} {self.state} on {self.record.backend}>"

    @property
    def id(self) -> str:
        return self.record.id

    @property
    def state(self) -> str:
        return self.record.state

    def refresh(self) -> Job:
        self.record = self._keeper.store.get(self.id)
        return self

    def wait(self, timeout: float | None = None, *, poll: float = 0.2) -> Job:
        """Block until the job ends (a worker must be running, or use ``Keeper.run``);
        raises TimeoutError after ``timeout`` seconds and JobFailed if it failed."""
        self._keeper.wait([self.id], timeout=timeout, poll=poll)
        self.refresh()
        if self.state != "done":
            raise JobFailed(f"job {self.id[:12]} ended {self.state}: {self.record.error or ''}")
        return self

    @property
    def result(self) -> StoredResult | None:
        return self._keeper.store.result(self.id)

    @property
    def counts(self) -> dict[str, int]:
        """The counts of a done job (bit string → shots)."""
        result = self.result
        if result is None:
            raise JobFailed(f"job {self.id[:12]} is {self.refresh().state}: no counts yet")
        return dict(result.counts or {})

    @property
    def probabilities(self) -> dict[str, float] | None:
        result = self.result
        return (
            None if result is None or result.probabilities is None else dict(result.probabilities)
        )

    @property
    def attempts(self) -> list[Attempt]:
        return self._keeper.store.attempts(self.id)

    @property
    def log_entry(self) -> LogEntry | None:
        return self._keeper.store.log_entry_for(self.id)


class Keeper:
    """One keep: its store, configuration, signing keys and backends."""

    def __init__(self, *, path: Path, store: Store, config: KeepConfig, keyring: KeyRing) -> None:
        self.path = path
        self.store = store
        self.config = config
        self.keyring = keyring
        self._backends: dict[str, Backend] = {}

    # -- opening --------------------------------------------------------------------------

    @classmethod
    def open(
        cls, path: str | os.PathLike[str] | None = None, *, store: str | None = None,
        create: bool = True,
    ) -> Keeper:  # fmt: skip
        """Open the keep at ``path`` (default ``./.jobkeeper``), creating it when asked.
        ``store`` overrides where the archive lives (a ``postgresql://`` URL)."""
        keep = Path(path) if path is not None else DEFAULT_KEEP
        if not keep.exists():
            if not create:
                raise StoreUnavailable(f"no keep at {keep} (run 'jobkeeper init' first)")
            cls._create_dir(keep)
        elif not keep.is_dir():
            raise ConfigError(f"{keep} is not a directory")
        config = load_config(keep)
        if not (keep / CONFIG_NAME).exists() and create:
            cls._write(keep / CONFIG_NAME, _config_text(store))
            config = load_config(keep)
        location = store or config.store or str(keep / ARCHIVE_NAME)
        if not create and not location.startswith("postgres") and not Path(location).exists():
            raise StoreUnavailable(f"no archive at {location} (run 'jobkeeper init' first)")
        keyring = KeyRing(keep / KEYS_DIR)
        if create and not keyring.exists():
            try:
                keyring.ensure()
            except OSError as exc:
                raise ConfigError(f"cannot write the signing key in {keep}: {exc}") from exc
            # A new keep starts its list of trusted signers (only its own key, for now); a
            # keep made before the list existed starts it at its first verify, which says so.
            from jobkeeper.audit.trust import start_trust_file

            start_trust_file(keep)
        the_store = open_store(location, create=create)
        keeper = cls(path=keep, store=the_store, config=config, keyring=keyring)
        if keyring.exists():
            keeper._register_keys()
        if the_store.get_meta("origin") is None:
            the_store.ensure_meta("origin", f"jobkeeper/{uuid.uuid4().hex[:16]}")
        return keeper

    @staticmethod
    def _create_dir(keep: Path) -> None:
        try:
            keep.mkdir(parents=True, exist_ok=True)
            probe = keep / ".write-test"
            probe.write_text("")
            probe.unlink()
        except OSError as exc:
            raise ConfigError(f"cannot write the keep directory {keep}: {exc.strerror}") from exc

    @staticmethod
    def _write(path: Path, text: str) -> None:
        try:
            path.write_text(text, encoding="utf-8")
        except OSError as exc:
            raise ConfigError(f"cannot write {path}: {exc.strerror}") from exc

    def _register_keys(self) -> None:
        import base64

        for record in self.keyring.public_keys():
            self.store.register_key(record.fingerprint, base64.b64encode(record.raw).decode())

    @property
    def trust(self) -> KeepTrust:
        """Whose signatures ``verify`` accepts: add, remove, list, import, rotate."""
        from jobkeeper.audit.trust import KeepTrust

        return KeepTrust(self.path, self.keyring, self.store)

    def close(self) -> None:
        self.store.close()

    def __enter__(self) -> Keeper:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # -- backends -------------------------------------------------------------------------

    def backend_configs(self) -> dict[str, dict[str, Any]]:
        from jobkeeper.backends import DEFAULT_BACKENDS

        configs = {name: dict(cfg) for name, cfg in DEFAULT_BACKENDS.items()}
        configs.update({name: dict(cfg) for name, cfg in self.config.backends.items()})
        for cfg in configs.values():
            # A profile given as a relative path means relative to the keep, not to
            # wherever the command happens to run.
            profile = cfg.get("profile")
            if isinstance(profile, str) and profile.endswith(".toml"):
                path = Path(profile).expanduser()
                cfg["profile"] = str(path if path.is_absolute() else self.path.resolve() / path)
        return configs

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
        done = [job for job in self.store.list_jobs(state="done") if job.backend == source]
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

        snapshot = run_coroutine(fetch())
        return dict(snapshot) if isinstance(snapshot, Mapping) else None

    def backend_infos(self) -> list[BackendInfo]:
        return [self.backend(name).info for name in sorted(self.backend_configs())]

    # -- submitting -----------------------------------------------------------------------

    @staticmethod
    def load_circuit(circuit: CircuitInput) -> Circuit:
        from jobkeeper.circuit import Circuit, load_qasm, parse_qasm

        if isinstance(circuit, Circuit):
            return circuit
        if isinstance(circuit, os.PathLike) or (
            "\n" not in circuit and ";" not in circuit and Path(circuit).suffix != ""
        ):
            return load_qasm(Path(circuit))
        return parse_qasm(circuit)

    def submit(self, circuit: CircuitInput, **options: Any) -> Job:
        """Queue one job (see :meth:`submit_many` for the options)."""
        return self.submit_many([circuit], **options)[0].job

    def submit_many(
        self,
        circuits: Sequence[CircuitInput],
        *,
        backend: str | None = None,
        shots: int | None = None,
        seed: int | None = None,
        label: str | None = None,
        repeat: int = 0,
        exact: bool = False,
        options: Mapping[str, Any] | None = None,
        over_budget: bool = False,
        code_dir: str | os.PathLike[str] | None = None,
        rerun_of: str | None = None,
    ) -> list[Submitted]:
        """Queue jobs in one transaction. A job whose key is already done or queued is not
        queued again: the existing job comes back with ``deduplicated=True``."""
        from jobkeeper.circuit import canonical_text
        from jobkeeper.hashing import sha256_tag
        from jobkeeper.provenance.manifest import git_code_version
        from jobkeeper.spec import JobSpec, job_key

        name = backend or self.config.defaults.backend
        the_backend = self.backend(name)
        info = the_backend.info
        shots = self.config.defaults.shots if shots is None else shots
        if shots <= 0:
            raise ConfigError(f"shots must be a positive whole number, got {shots}")
        if shots > info.max_shots:
            raise ConfigError(f"backend {name} allows at most {info.max_shots} shots, got {shots}")
        code_version = git_code_version(Path(code_dir) if code_dir else Path.cwd())
        new_jobs: list[NewJob] = []
        for item in circuits:
            circuit = self.load_circuit(item)
            spec = JobSpec(
                circuit=circuit, backend=name, shots=shots, seed=seed, repeat=repeat,
                exact=exact, options=dict(options or {}), rerun_of=rerun_of,
            )  # fmt: skip
            text = canonical_text(circuit)
            chash = sha256_tag(text.encode("utf-8"))  # circuit_hash, without writing it twice
            key = job_key(spec, circuit_hash=chash, backend_config_hash=info.config_hash)
            cost = info.pricing.cost(shots) if info.pricing is not None else None
            new_jobs.append(
                NewJob(
                    id=uuid.uuid4().hex,
                    job_key=key,
                    backend=name,
                    shots=shots,
                    seed=None if seed is None else str(seed),
                    repeat=repeat,
                    labels=() if label is None else (label,),
                    spec={
                        "circuit": text,
                        "circuitHash": chash,
                        "sourceHash": circuit.source_hash,
                        "sourceName": circuit.source_name,
                        "exact": exact,
                        "options": dict(options or {}),
                        "codeVersion": code_version,
                        "rerunOf": rerun_of,
                    },
                    max_attempts=self.config.defaults.max_attempts,
                    cost=cost,
                )
            )
        if not over_budget:
            self.check_budget(sum(job.cost or 0.0 for job in new_jobs), label)
        results = self.store.enqueue(new_jobs)
        return [Submitted(Job(self, record), not created) for record, created in results]

    def check_budget(self, cost: float, label: str | None) -> None:
        """Refuse (BudgetExceeded) a cost that would pass the keep-wide or label cap."""
        if cost <= 0:
            return
        caps: list[tuple[str, float, float]] = []
        if self.config.budget.total is not None:
            caps.append(("the keep's budget", self.config.budget.total, self.store.spent()))
        if label is not None and label in self.config.budget.labels:
            caps.append(
                (f"the budget of label {label!r}", self.config.budget.labels[label],
                 self.store.spent(label))
            )  # fmt: skip
        for what, cap, spent in caps:
            left = cap - spent
            if cost > left + 1e-12:
                raise BudgetExceeded(
                    f"this submission would cost {cost:.4g} but {what} has {max(left, 0):.4g} "
                    f"left of {cap:.4g}; nothing was queued (use --over-budget to submit anyway)"
                )

    # -- running --------------------------------------------------------------------------

    def sealer(self) -> Sealer:
        from jobkeeper.audit.sealing import Sealer

        origin = self.store.get_meta("origin") or "jobkeeper"
        return Sealer(self.keyring.load_active(), origin=origin)

    def worker(self, **options: Any) -> Worker:
        """A worker draining this keep; options as for :class:`~jobkeeper.worker.Worker`
        (retry and poll policies default to the keep's config.toml)."""
        from jobkeeper.worker import Worker

        options.setdefault("retry", self.config.retry)
        options.setdefault("poll", self.config.poll)
        return Worker(
            store=self.store, resolve_backend=self.backend, sealer=self.sealer(), **options
        )

    def work(
        self,
        *,
        once: bool = False,
        install_signals: bool = False,
        announce: Callable[[str], None] | None = None,
        **options: Any,
    ) -> WorkerStats:
        """Run a worker on this keep until stopped (or, with ``once``, drained)."""
        worker = self.worker(**options)
        return run_coroutine(
            worker.run(once=once, install_signals=install_signals, announce=announce)
        )

    def run(self, circuit: CircuitInput, **options: Any) -> Job:
        """Submit one job and run it here and now (inline, no separate worker)."""
        return self.run_many([circuit], **options)[0].job

    def run_many(
        self,
        circuits: Sequence[CircuitInput],
        *,
        lease: LeasePolicy = DEFAULT_LEASE,
        retry: RetryPolicy | None = None,
        **options: Any,
    ) -> list[Submitted]:
        submitted = self.submit_many(circuits, **options)
        pending = [s.job.id for s in submitted if s.job.state not in TERMINAL_STATES]
        if pending:
            extra: dict[str, Any] = {"retry": retry} if retry is not None else {}
            self.work(once=True, ids=pending, local_executor="thread", lease=lease,
                      idle_sleep=0.05, **extra)  # fmt: skip
        for item in submitted:
            item.job.refresh()
        return submitted

    def wait(
        self,
        ids: Sequence[str],
        *,
        timeout: float | None = None,
        poll: float = 0.2,
        progress: Callable[[int, int], None] | None = None,
    ) -> list[JobRecord]:
        """Block until every job has ended; ``progress(ended, total)`` is told as they do."""
        deadline = None if timeout is None else time.monotonic() + timeout
        while True:
            records = self.store.get_many(list(ids))
            ended = sum(record.state in TERMINAL_STATES for record in records)
            if progress is not None:
                progress(ended, len(records))
            if ended == len(records):
                return records
            if deadline is not None and time.monotonic() > deadline:
                raise TimeoutError(f"{len(records) - ended} of {len(records)} jobs still running")
            time.sleep(poll)

    # -- reading --------------------------------------------------------------------------

    def job(self, id_or_prefix: str) -> Job:
        return Job(self, self.store.get(id_or_prefix))

    def jobs(
        self, *, label: str | None = None, state: str | None = None, limit: int | None = None
    ) -> list[Job]:
        return [Job(self, r) for r in self.store.list_jobs(label=label, state=state, limit=limit)]

    def export(
        self, path: str | os.PathLike[str], *, label: str | None = None, force: bool = False
    ) -> ExportSummary:
        """Write the jobs (of ``label``, or all) and their counts to a new SQLite file for
        analysis (see :mod:`jobkeeper.store.export`). The counts of done jobs are checked
        against their signed manifests first (VerificationError if any fails). Refuses to
        replace an existing file unless ``force``, and any path inside the keep."""
        from jobkeeper.audit.verification import verify_jobs
        from jobkeeper.exceptions import VerificationError
        from jobkeeper.store.export import check_target, export_jobs

        check_target(Path(path), keep_dir=self.path, force=force)  # before any work
        records = self.store.list_jobs(label=label)
        done = [r.id for r in records if r.state == "done"]
        if done:
            report = verify_jobs(self, done)
            if not report.ok:
                raise VerificationError(
                    "not exported: the archive does not verify: " + "; ".join(report.problems[:3])
                )
        return export_jobs(
            self.store, records, Path(path), keep_dir=self.path, force=force, label=label,
            origin=self.store.get_meta("origin"),
        )  # fmt: skip

    def cancel(self, id_or_prefix: str) -> Job:
        record = self.store.get(id_or_prefix)
        if record.state in TERMINAL_STATES:
            raise JobkeeperError(f"job {record.id[:12]} has already ended ({record.state})")
        return Job(self, self.store.request_cancel(record.id))
