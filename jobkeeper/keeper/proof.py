"""Proof and judgement: signing keys, trust, verification, bundles, the analysis export,
reruns and comparisons of :class:`jobkeeper.Keeper`, built on the ``audit`` package."""

from __future__ import annotations

import os
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from jobkeeper.exceptions import ConfigError
from jobkeeper.job import Job
from jobkeeper.keeper.runs import KeepRuns
from jobkeeper.outputs import check_output, write_output
from jobkeeper.provenance.keys import PublicKeyRecord

if TYPE_CHECKING:
    from jobkeeper.audit.judging import Judgement
    from jobkeeper.audit.trust import KeepTrust
    from jobkeeper.provenance import VerifyReport
    from jobkeeper.store import ComparisonRecord
    from jobkeeper.store.export import ExportSummary


@dataclass(frozen=True)
class LogStatus:
    """The log at its latest signed checkpoint: ``size`` entries, ``note`` the signed
    checkpoint itself (a C2SP signed note), ``checkpoint_at`` when it was signed."""

    size: int
    checkpoints: int
    checkpoint_at: float | None
    note: str | None
    origin: str | None


class KeepProof(KeepRuns):
    """What a keep can prove about its jobs, and its judgements of them."""

    @property
    def trust(self) -> KeepTrust:
        """Whose signatures ``verify`` accepts: add, remove, list, import, rotate."""
        from jobkeeper.audit.trust import KeepTrust

        return KeepTrust(self.path, self.keyring, self.store)

    def keys(self) -> list[PublicKeyRecord]:
        """The keep's public signing keys: the active one first, then earlier ones (still
        trusted for the entries they signed). ``Keeper.trust`` rotates and trusts keys."""
        active = self.keyring.active_record()
        return [active] + [
            r for r in self.keyring.public_keys() if r.fingerprint != active.fingerprint
        ]

    def export_key(self, path: str | os.PathLike[str], *, force: bool = False) -> PublicKeyRecord:
        """Write the active public key (fingerprint and raw Ed25519 key, as JSON) to
        ``path``, for a referee or another keep's ``trust add``; the rules of
        :mod:`jobkeeper.outputs` apply."""
        import json

        record = self.keyring.active_record()
        text = json.dumps({"fingerprint": record.fingerprint, "public_key": record.public_key})
        write_output(Path(path), text + "\n", guarded=self.guarded_paths(), force=force)
        return record

    def manifest(self, job: Job | str) -> dict[str, Any]:
        """A done job's signed in-toto Statement, verified against the keys trusted here
        (VerificationError if it does not verify)."""
        from jobkeeper.audit.judging import verified_manifest

        return verified_manifest(self.store, self._job(job).record, self.trust.load().keys)

    def verify(
        self, ids: Sequence[str] | None = None, *, trusted: Iterable[str] | None = None,
        integrity_only: bool = False, since: Sequence[str | os.PathLike[str]] = (),
    ) -> VerifyReport:  # fmt: skip
        """Verify the whole log and the named jobs (every done job when ``ids`` is None):
        integrity, that the log extends the keep's witness and each checkpoint or bundle in
        ``since``, and that every signer is trusted here (``trusted``: only these key
        fingerprints; ``integrity_only``: skip the trust check)."""
        from jobkeeper.audit.verification import verify_archive
        from jobkeeper.audit.witness import WITNESS_NAME

        wanted = None if ids is None else [self.job(i).id for i in ids]
        trust_set, notices = self.trust.for_verify()
        report = verify_archive(
            self.store, trust_set, wanted, trusted=trusted, integrity_only=integrity_only,
            witness=self.path / WITNESS_NAME, since=[Path(p) for p in since],
        )  # fmt: skip
        report.warnings[:0] = notices
        return report

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
        self, path: str | os.PathLike[str], ids: Sequence[str] = (), *, label: str | None = None,
        force: bool = False,
    ) -> int:  # fmt: skip
        """Write the named done jobs, and those with ``label``, to one bundle file that a
        referee verifies offline; returns how many jobs it holds. Never over an existing
        file unless ``force``, never inside the keep (see :mod:`jobkeeper.outputs`), never
        from an archive that does not verify."""
        from jobkeeper.audit.verification import export_bundle, require_ok

        if label is None and not ids:
            raise ConfigError("give job ids or a label")
        check_output(Path(path), guarded=self.guarded_paths(), force=force)
        chosen = {self.job(i).id for i in ids}
        if label is not None:
            chosen |= {job.id for job in self.jobs(label=label, state="done")}
        if not chosen:
            raise ConfigError(f"no done job with label {label!r}")
        # Never a bundle of forgeries; whose signatures count is the referee's to judge.
        require_ok(self.verify(sorted(chosen), integrity_only=True), "not bundled")
        return export_bundle(self.store, sorted(chosen), Path(path), force=force)

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
                           self._trusted_keys(), deterministic_backend=deterministic,
                           alpha=alpha)  # fmt: skip

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
        keys = self._trusted_keys()
        if b is None:
            return compare_ideal(self.store, self.sealer(), first, keys, alpha=alpha)
        second = self._job(b).record
        return compare_jobs(self.store, self.sealer(), first, second, keys, alpha=alpha)

    def comparisons(self, job: Job | str | None = None) -> list[ComparisonRecord]:
        """Archived reruns and comparisons, oldest first (those of one job, or all)."""
        return self.store.comparisons(None if job is None else self._job(job).id)

    def log_status(self) -> LogStatus:
        """The signed log's size and its latest checkpoint (nothing is verified here)."""
        checkpoints = self.store.checkpoints()
        latest = checkpoints[-1] if checkpoints else None
        return LogStatus(
            size=0 if latest is None else latest.size, checkpoints=len(checkpoints),
            checkpoint_at=None if latest is None else latest.created_at,
            note=None if latest is None else latest.note, origin=self.store.get_meta("origin"),
        )  # fmt: skip

    def _job(self, job: Job | str) -> Job:
        return job if isinstance(job, Job) else self.job(job)

    def export(
        self, path: str | os.PathLike[str], *, label: str | None = None, force: bool = False
    ) -> ExportSummary:
        """Write the jobs (of ``label``, or all) and their counts to a new SQLite file for
        analysis (see :mod:`jobkeeper.store.export`). The counts of done jobs are checked
        against their signed manifests first (VerificationError if any fails). Refuses to
        replace an existing file unless ``force``, and any path inside the keep."""
        from jobkeeper.audit.verification import require_ok
        from jobkeeper.store.export import export_jobs

        guarded = self.guarded_paths()
        check_output(Path(path), guarded=guarded, force=force)  # before any work
        records = self.store.list_jobs(label=label)
        done = [r.id for r in records if r.state == "done"]
        if done:
            require_ok(self.verify(done), "not exported")
        layouts = {job_id: self.job(job_id).registers for job_id in done}
        return export_jobs(
            self.store, records, Path(path), guarded=guarded, force=force, label=label,
            origin=self.store.get_meta("origin"), layouts=layouts,
        )  # fmt: skip
