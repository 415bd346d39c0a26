"""Submitting, running and reading jobs: the queue side of :class:`jobkeeper.Keeper`.

Options are checked once, by :class:`~jobkeeper.options.SubmitOptions`, whether they come
from here or from the command line.
"""

from __future__ import annotations

import asyncio
import os
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, TypeAlias, Unpack

from jobkeeper.exceptions import ConfigError, JobkeeperError
from jobkeeper.job import Job, Submitted, wait_for
from jobkeeper.keeper.core import KeepCore
from jobkeeper.keeper.target import JobTarget
from jobkeeper.queue import TERMINAL_STATES
from jobkeeper.store import JobFilter, JobRecord, NewJob, PageCursor

# Signing, simulating and parsing load numpy, cryptography and the backends: imported
# where they are used, so that opening a keep to read it (`jobkeeper jobs`) stays quick.
if TYPE_CHECKING:
    from jobkeeper.audit.sealing import Sealer
    from jobkeeper.circuit import Circuit, Template
    from jobkeeper.options import SubmitFields, SubmitOptions
    from jobkeeper.preflight import PreflightReport
    from jobkeeper.queue import RetryPolicy
    from jobkeeper.sweeps import Bindings
    from jobkeeper.worker import Worker, WorkerSettings, WorkerStats

CircuitInput: TypeAlias = "str | os.PathLike[str] | Circuit"


def _path_of(circuit: str | os.PathLike[str]) -> Path | None:
    """The file a circuit input names, or None when it is program text."""
    if isinstance(circuit, os.PathLike) or (
        "\n" not in circuit and ";" not in circuit and Path(circuit).suffix != ""
    ):
        return Path(circuit)
    return None


def bind_template(template: Template, inputs: Sequence[str]) -> tuple[Circuit, Bindings]:
    """The template's circuit with its inputs bound from ``NAME=VALUE`` items, and those
    bindings (ConfigError naming an unknown name, a missing input or a bad value)."""
    from jobkeeper.sweeps import bind_settings

    where = f"{template.filename or '<input>'}: "
    bindings = bind_settings(template.inputs, inputs, where=where)
    return template.bind(bindings.numbers()), bindings


def _options(options: SubmitOptions | None, fields: SubmitFields) -> SubmitOptions:
    from jobkeeper.options import SubmitOptions

    return SubmitOptions.of(options, **fields)


class KeepRuns(KeepCore):
    """Jobs in and out of the queue."""

    # -- submitting -----------------------------------------------------------------------

    @staticmethod
    def load_circuit(circuit: CircuitInput) -> Circuit:
        from jobkeeper.circuit import Circuit, load_qasm, parse_qasm

        if isinstance(circuit, Circuit):
            return circuit
        path = _path_of(circuit)
        return parse_qasm(str(circuit)) if path is None else load_qasm(path)

    @staticmethod
    def load_template(circuit: str | os.PathLike[str]) -> Template:
        """A program (file or text) as a template with its ``input`` parameters."""
        from jobkeeper.circuit import load_template, parse_template

        path = _path_of(circuit)
        return parse_template(str(circuit)) if path is None else load_template(path)

    @staticmethod
    def load_bound(circuit: CircuitInput, inputs: Sequence[str] = ()) -> tuple[Circuit, Bindings]:
        """A program (file, text or Circuit) with its ``input`` parameters bound from
        ``NAME=VALUE`` items, typed by the program's declarations, and those bindings
        (ConfigError naming an unknown name, a missing input or a bad value)."""
        from jobkeeper.circuit import Circuit
        from jobkeeper.sweeps import Bindings

        if isinstance(circuit, Circuit):
            if inputs:
                raise ConfigError("a Circuit object has no inputs to set")
            return circuit, Bindings()
        return bind_template(KeepRuns.load_template(circuit), inputs)

    def check(self, circuit: CircuitInput, **fields: Unpack[SubmitFields]) -> PreflightReport:
        """Before spending: does the circuit fit the backend, its metrics, the estimated
        cost, device time and chance of an error-free run (nothing is queued). ``inputs``
        (``NAME=VALUE`` items) bind a program's ``input`` parameters."""
        from jobkeeper.preflight import preflight

        options = _options(None, fields)
        name = options.backend or self.config.defaults.backend
        shots = options.shots or self.config.defaults.shots
        label = str(circuit) if isinstance(circuit, (str, os.PathLike)) else "<circuit>"
        loaded, bindings = self.load_bound(circuit, options.inputs)
        return preflight(loaded, self.backend(name), name=name, shots=shots, source=label,
                         inputs=bindings)  # fmt: skip

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
        target = self._target(options)
        new_jobs: list[NewJob] = []
        # A rerun runs the canonical text, whose registers are c0, c1, …: it keeps the
        # names the original's user gave them.
        names = None if rerun_of is None else self.store.get(rerun_of).spec.register_names
        for item in circuits:
            circuit, bindings, template = self._bound(item, options.inputs)
            new_jobs.append(target.job(circuit, bindings, template, rerun_of, names))
        return self._enqueue(new_jobs, options)

    def _bound(
        self, item: CircuitInput, inputs: Sequence[str]
    ) -> tuple[Circuit, Bindings | None, Template | None]:
        """A program's circuit with its inputs bound, the bindings and the template (the
        last two None for a program without inputs)."""
        from jobkeeper.circuit import Circuit

        if isinstance(item, Circuit):
            return self.load_bound(item, inputs)[0], None, None
        template = self.load_template(item)
        circuit, bindings = bind_template(template, inputs)
        return (circuit, bindings, template) if bindings else (circuit, None, None)

    def _target(self, options: SubmitOptions) -> JobTarget:
        """Where and how a submission's jobs run: checked once for all of them."""
        from jobkeeper.provenance.manifest import git_code_version

        name = options.backend or self.config.defaults.backend
        info = self.backend(name).info
        shots = options.shots or self.config.defaults.shots
        if shots > info.max_shots:
            raise ConfigError(f"backend {name} allows at most {info.max_shots} shots, got {shots}")
        return JobTarget(
            name=name, info=info, shots=shots, options=options,
            code_version=git_code_version(Path(options.code_dir or Path.cwd())),
            max_attempts=self.config.defaults.max_attempts,
        )  # fmt: skip

    def _enqueue(self, new_jobs: Sequence[NewJob], options: SubmitOptions) -> list[Submitted]:
        self._check_budget(new_jobs, options)
        return self._submitted(self.store.enqueue(new_jobs))

    def _check_budget(self, new_jobs: Sequence[NewJob], options: SubmitOptions) -> None:
        if not options.over_budget:
            cost = sum(job.cost or 0.0 for job in new_jobs)
            self.config.budget.check(cost, options.labels, self.store.spent)

    def _submitted(self, results: Sequence[tuple[JobRecord, bool]]) -> list[Submitted]:
        return [
            Submitted(Job(self.store, record, self._trusted_keys), not created)
            for record, created in results
        ]

    # -- running --------------------------------------------------------------------------

    def sealer(self) -> Sealer:
        from jobkeeper.audit.sealing import Sealer
        from jobkeeper.audit.witness import WITNESS_NAME

        origin = self.store.get_meta("origin") or "jobkeeper"
        return Sealer(self.keyring.load_active(), origin=origin, witness=self.path / WITNESS_NAME)

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
        from jobkeeper._execution import run_coroutine
        from jobkeeper.options import positive_seconds

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
        self.keyring.load_active()  # a key it cannot sign with refuses before queueing
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
        return [Job(self.store, record, self._trusted_keys) for record in records]

    # -- reading --------------------------------------------------------------------------

    def job(self, id_or_prefix: str) -> Job:
        return Job(self.store, self.store.get(id_or_prefix), self._trusted_keys)

    def jobs(
        self, *, label: str | None = None, state: str | None = None, limit: int | None = None,
        sweep: str | None = None,
    ) -> list[Job]:  # fmt: skip
        """Jobs oldest first; ``sweep`` (an id or prefix) keeps its points' jobs only."""
        sweep_id = None if sweep is None else self.store.get_sweep(sweep).id
        return [
            Job(self.store, r, self._trusted_keys)
            for r in self.store.list_jobs(label=label, state=state, limit=limit, sweep=sweep_id)
        ]

    def job_page(
        self, where: JobFilter | None = None, *, after: PageCursor | None = None,
        limit: int = 50,
    ) -> list[Job]:  # fmt: skip
        """A page of jobs matching ``where``, newest first; pass the last job's
        ``(created_at, id)`` as ``after`` for the next page (an indexed keyset query)."""
        return [Job(self.store, r) for r in self.store.page_jobs(where or JobFilter(),
                                                                 after=after, limit=limit)]  # fmt: skip

    def count_jobs(self, where: JobFilter | None = None) -> int:
        return self.store.count_jobs(where or JobFilter())

    def counts_by_state(self) -> dict[str, int]:
        """How many jobs are in each state (states with none are left out)."""
        return self.store.counts_by_state()

    def spent(self, label: str | None = None) -> float:
        """The estimated cost of live and done jobs (of one label, or all), what budgets cap."""
        return self.store.spent(label)

    def cancel(self, id_or_prefix: str) -> Job:
        record = self.store.get(id_or_prefix)
        if record.state in TERMINAL_STATES:
            raise JobkeeperError(f"job {record.id[:12]} has already ended ({record.state})")
        return Job(self.store, self.store.request_cancel(record.id), self._trusted_keys)
