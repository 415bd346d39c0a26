"""The Python API: :class:`Keeper`, one keep. Everything the command line does goes
through here, so a notebook can do it too::

    from jobkeeper import Keeper
    keeper = Keeper.open(".jobkeeper")
    job = keeper.run("bell.qasm", shots=1000, seed=7)
    job.counts, job.spec.seed

Options are checked once, by :class:`~jobkeeper.options.SubmitOptions`, whether they come
from here or from the command line.
"""

from __future__ import annotations

import asyncio
import os
import uuid
from collections.abc import Callable, Iterable, Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any, TypeAlias, Unpack

from jobkeeper.config import (
    ARCHIVE_NAME,
    CONFIG_NAME,
    DEFAULT_KEEP,
    KEYS_DIR,
    KeepConfig,
    backend_configs,
    config_text,
    create_keep_dir,
    load_config,
    write_config,
)
from jobkeeper.exceptions import ConfigError, JobkeeperError, StoreUnavailable
from jobkeeper.job import Job, Submitted, wait_for
from jobkeeper.provenance.keys import KeyRing, PublicKeyRecord
from jobkeeper.queue import TERMINAL_STATES
from jobkeeper.store import NewJob, Store, open_store

# Signing, simulating and parsing load numpy, cryptography and the backends: imported
# where they are used, so that opening a keep to read it (`jobkeeper jobs`) stays quick.
if TYPE_CHECKING:
    from jobkeeper.audit.judging import Judgement
    from jobkeeper.audit.sealing import Sealer
    from jobkeeper.audit.trust import KeepTrust
    from jobkeeper.backend import Backend, BackendInfo
    from jobkeeper.circuit import Circuit
    from jobkeeper.options import SubmitFields, SubmitOptions
    from jobkeeper.preflight import PreflightReport
    from jobkeeper.provenance import VerifyReport
    from jobkeeper.queue import RetryPolicy
    from jobkeeper.store.export import ExportSummary
    from jobkeeper.worker import Worker, WorkerSettings, WorkerStats

CircuitInput: TypeAlias = "str | os.PathLike[str] | Circuit"


def _options(options: SubmitOptions | None, fields: SubmitFields) -> SubmitOptions:
    from jobkeeper.options import SubmitOptions

    return SubmitOptions.of(options, **fields)


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
            create_keep_dir(keep)
        elif not keep.is_dir():
            raise ConfigError(f"{keep} is not a directory")
        config = load_config(keep)
        if not (keep / CONFIG_NAME).exists() and create:
            write_config(keep / CONFIG_NAME, config_text(store))
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

        from jobkeeper.worker import run_coroutine

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

    def check(self, circuit: CircuitInput, **fields: Unpack[SubmitFields]) -> PreflightReport:
        """Before spending: does the circuit fit the backend, its metrics, the estimated
        cost, device time and chance of an error-free run (nothing is queued)."""
        from jobkeeper.preflight import preflight

        options = _options(None, fields)
        name = options.backend or self.config.defaults.backend
        shots = options.shots or self.config.defaults.shots
        label = str(circuit) if isinstance(circuit, (str, os.PathLike)) else "<circuit>"
        return preflight(self.load_circuit(circuit), self.backend(name), name=name,
                         shots=shots, source=label)  # fmt: skip

    def submit(self, circuit: CircuitInput, /, **fields: Unpack[SubmitFields]) -> Job:
        """Queue one job (the options are those of :class:`SubmitOptions`)."""
        return self.submit_many([circuit], **fields)[0].job

    def submit_many(
        self, circuits: Sequence[CircuitInput], options: SubmitOptions | None = None, /,
        **fields: Unpack[SubmitFields],
    ) -> list[Submitted]:  # fmt: skip
        """Queue jobs in one transaction. A job whose key is already done or queued is not
        queued again: the existing job comes back with ``deduplicated=True``."""
        return self._submit(circuits, _options(options, fields))

    def _submit(
        self, circuits: Sequence[CircuitInput], options: SubmitOptions,
        rerun_of: str | None = None,
    ) -> list[Submitted]:  # fmt: skip
        from jobkeeper.circuit import canonical_text
        from jobkeeper.hashing import sha256_tag
        from jobkeeper.provenance.manifest import git_code_version
        from jobkeeper.spec import JobSpec, job_key

        name = options.backend or self.config.defaults.backend
        info = self.backend(name).info
        shots = options.shots or self.config.defaults.shots
        if shots > info.max_shots:
            raise ConfigError(f"backend {name} allows at most {info.max_shots} shots, got {shots}")
        code_version = git_code_version(Path(options.code_dir or Path.cwd()))
        cost = info.pricing.cost(shots) if info.pricing is not None else None
        new_jobs: list[NewJob] = []
        for item in circuits:
            circuit = self.load_circuit(item)
            text = canonical_text(circuit)
            spec = JobSpec.new(
                circuit_text=text, circuit_hash=sha256_tag(text.encode("utf-8")), backend=name,
                shots=shots, seed=options.seed, repeat=options.repeat, exact=options.exact,
                options=options.backend_options, source_hash=circuit.source_hash,
                source_name=circuit.source_name, code_version=code_version, rerun_of=rerun_of,
            )  # fmt: skip
            new_jobs.append(
                NewJob(
                    id=uuid.uuid4().hex,
                    spec=spec,
                    labels=tuple(sorted(options.labels)),
                    cost=cost,
                    job_key=job_key(spec, backend_config_hash=info.config_hash),
                    max_attempts=self.config.defaults.max_attempts,
                )
            )
        if not options.over_budget:
            cost = sum(job.cost or 0.0 for job in new_jobs)
            self.config.budget.check(cost, options.labels, self.store.spent)
        results = self.store.enqueue(new_jobs)
        return [Submitted(Job(self.store, record), not created) for record, created in results]

    # -- running --------------------------------------------------------------------------

    def sealer(self) -> Sealer:
        from jobkeeper.audit.sealing import Sealer

        origin = self.store.get_meta("origin") or "jobkeeper"
        return Sealer(self.keyring.load_active(), origin=origin)

    def worker(self, **settings: Unpack[WorkerSettings]) -> Worker:
        """A worker draining this keep (retry and poll policies default to the keep's
        config.toml)."""
        from jobkeeper.worker import Worker

        settings.setdefault("retry", self.config.retry)
        settings.setdefault("poll", self.config.poll)
        return Worker(
            store=self.store, resolve_backend=self.backend, sealer=self.sealer(), **settings
        )

    def work(
        self, *, once: bool = False, timeout: float | None = None,
        install_signals: bool = False, announce: Callable[[str], None] | None = None,
        **settings: Unpack[WorkerSettings],
    ) -> WorkerStats:  # fmt: skip
        """Run a worker on this keep until stopped (or, with ``once``, drained); with a
        ``timeout``, it stops claiming after that many seconds and hands back what is left."""
        from jobkeeper.options import positive_seconds
        from jobkeeper.worker import run_coroutine

        limit = positive_seconds(timeout)
        worker = self.worker(**settings)

        async def drive() -> WorkerStats:
            if limit is not None:
                asyncio.get_running_loop().call_later(limit, worker.request_stop)
            return await worker.run(once=once, install_signals=install_signals,
                                    announce=announce)  # fmt: skip

        return run_coroutine(drive())

    def run(self, circuit: CircuitInput, /, **fields: Unpack[SubmitFields]) -> Job:
        """Submit one job and run it here and now (inline, no separate worker)."""
        return self.run_many([circuit], **fields)[0].job

    def run_many(
        self, circuits: Sequence[CircuitInput], options: SubmitOptions | None = None, /, *,
        retry: RetryPolicy | None = None, **fields: Unpack[SubmitFields],
    ) -> list[Submitted]:  # fmt: skip
        """Submit jobs and run them here; ``timeout`` bounds the wait (jobs not ended by
        then stay queued for a worker); ``retry`` overrides the keep's retry policy."""
        return self._run(circuits, _options(options, fields), retry=retry)

    def _run(
        self, circuits: Sequence[CircuitInput], options: SubmitOptions, *,
        rerun_of: str | None = None, retry: RetryPolicy | None = None,
    ) -> list[Submitted]:  # fmt: skip
        submitted = self._submit(circuits, options, rerun_of)
        pending = [s.job.id for s in submitted if s.job.state not in TERMINAL_STATES]
        if pending:
            self.work(once=True, timeout=options.timeout, ids=pending, local_executor="thread",
                      idle_sleep=0.05, retry=retry or self.config.retry)  # fmt: skip
        for item in submitted:
            item.job.refresh()
        return submitted

    def wait(
        self, ids: Sequence[str], *, timeout: float | None = None, poll: float = 0.2,
        progress: Callable[[int, int], None] | None = None,
    ) -> list[Job]:  # fmt: skip
        """Block until every job has ended; ``progress(ended, total)`` is told as they do.
        TimeoutError after ``timeout`` seconds."""
        records = wait_for(self.store, ids, timeout=timeout, poll=poll, progress=progress)
        return [Job(self.store, record) for record in records]

    # -- reading --------------------------------------------------------------------------

    def job(self, id_or_prefix: str) -> Job:
        return Job(self.store, self.store.get(id_or_prefix))

    def jobs(
        self, *, label: str | None = None, state: str | None = None, limit: int | None = None
    ) -> list[Job]:
        return [
            Job(self.store, r) for r in self.store.list_jobs(label=label, state=state, limit=limit)
        ]

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
        return Job(self.store, self.store.request_cancel(record.id))

    # -- proof and judgement --------------------------------------------------------------

    def keys(self) -> list[PublicKeyRecord]:
        """The keep's public signing keys: the active one first, then earlier ones (still
        trusted for the entries they signed). ``Keeper.trust`` rotates and trusts keys."""
        active = self.keyring.active_record()
        return [active] + [
            r for r in self.keyring.public_keys() if r.fingerprint != active.fingerprint
        ]

    def manifest(self, job: Job | str) -> dict[str, Any]:
        """A done job's signed in-toto Statement, verified against the keys trusted here
        (VerificationError if it does not verify)."""
        from jobkeeper.audit.judging import verified_manifest

        return verified_manifest(self.store, self._job(job).record, self.trust.load().keys)

    def verify(
        self, ids: Sequence[str] | None = None, *, trusted: Iterable[str] | None = None,
        integrity_only: bool = False,
    ) -> VerifyReport:  # fmt: skip
        """Verify the whole log and the named jobs (every done job when ``ids`` is None):
        integrity, and that every signer is trusted here (``trusted``: only these key
        fingerprints; ``integrity_only``: skip the trust check)."""
        from jobkeeper.audit.verification import verify_jobs

        wanted = None if ids is None else [self.job(i).id for i in ids]
        return verify_jobs(self, wanted, trusted=trusted, integrity_only=integrity_only)

    @staticmethod
    def verify_bundle(
        path: str | os.PathLike[str], *, trusted: Iterable[str] | None = None,
        integrity_only: bool = False,
    ) -> VerifyReport:  # fmt: skip
        """Verify a bundle file offline (no keep needed), against the pinned ``trusted``
        fingerprints."""
        from jobkeeper.audit.verification import verify_bundle_file

        return verify_bundle_file(Path(path), trusted=trusted, integrity_only=integrity_only)

    def bundle(
        self, path: str | os.PathLike[str], ids: Sequence[str] = (), *, label: str | None = None
    ) -> int:
        """Write the named done jobs, and those with ``label``, to one bundle file that a
        referee verifies offline; returns how many jobs it holds."""
        from jobkeeper.audit.verification import export_bundle

        if label is None and not ids:
            raise ConfigError("give job ids or a label")
        chosen = {self.job(i).id for i in ids}
        if label is not None:
            chosen |= {job.id for job in self.jobs(label=label, state="done")}
        if not chosen:
            raise ConfigError(f"no done job with label {label!r}")
        return export_bundle(self, sorted(chosen), Path(path))

    def rerun(
        self, job: Job | str, *, backend: str | None = None, seed: int | None = None,
        alpha: float = 0.01,
    ) -> Judgement:  # fmt: skip
        """Run a job again from its signed manifest alone, then judge the two results."""
        from jobkeeper.audit.judging import check_alpha, judge_rerun, rerun_plan

        check_alpha(alpha)
        original = self._job(job).record
        plan = rerun_plan(self.store, original, self.trust.load().keys, backend=backend, seed=seed)
        again = self._run([plan.circuit_text], plan.options, rerun_of=original.id)[0].job
        deterministic = self.backend(plan.options.backend or "").info.deterministic
        return judge_rerun(self.store, self.sealer(), plan, original, again.record,
                           deterministic_backend=deterministic, alpha=alpha)  # fmt: skip

    def compare(
        self, a: Job | str, b: Job | str | None = None, *, ideal: bool = False,
        alpha: float = 0.01,
    ) -> Judgement:  # fmt: skip
        """Are two jobs' counts consistent with one distribution, or (``ideal``) a job's
        with its circuit's exact noiseless distribution? Archived, signed and logged."""
        from jobkeeper.audit.judging import check_alpha, compare_ideal, compare_jobs

        check_alpha(alpha)
        if (b is None) != ideal:
            raise ConfigError("compare two jobs, or one job with its ideal distribution")
        first = self._job(a).record
        if b is None:
            keys = self.trust.load().keys
            return compare_ideal(self.store, self.sealer(), first, keys, alpha=alpha)
        return compare_jobs(self.store, self.sealer(), first, self._job(b).record, alpha=alpha)

    def _job(self, job: Job | str) -> Job:
        return job if isinstance(job, Job) else self.job(job)
