"""Judging results: reruns from the manifest alone, and comparisons of count tables
(``jobkeeper rerun``, ``jobkeeper compare``). Every judgement is archived, signed and
appended to the log like a job, and ``show`` lists those that involve a job.

A rerun reads nothing but the original job's signed manifest (verified first): the
canonical circuit text, shots, the seed the backend actually used, the options. On the
same deterministic backend with the same seed the counts must be identical; anywhere else
the two count tables are compared statistically (:mod:`jobkeeper.stats`).
"""

from __future__ import annotations

import datetime as dt
import json
import uuid
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from jobkeeper.backend import Task
from jobkeeper.backends import ideal_simulator
from jobkeeper.circuit import parse_qasm
from jobkeeper.exceptions import JobkeeperError, VerificationError
from jobkeeper.hashing import canonical_json
from jobkeeper.provenance.dsse import verify_envelope
from jobkeeper.provenance.manifest import parse_statement
from jobkeeper.stats import Comparison, compare_counts, compare_to_distribution
from jobkeeper.store import ComparisonRecord

if TYPE_CHECKING:
    from jobkeeper.keeper import Job, Keeper


@dataclass
class Judgement:
    """A comparison of job A with job B (or with the ideal distribution), archived."""

    record: ComparisonRecord
    comparison: Comparison
    rerun_job: str | None = None

    def to_json(self) -> dict[str, Any]:
        data: dict[str, Any] = json.loads(self.record.report)
        data["id"] = self.record.id
        return data

    def summary(self) -> str:
        r = self.record
        what = {
            "rerun": "rerun of",
            "pair": "comparison of",
            "ideal": "comparison with the ideal of",
        }
        head = f"{what[r.kind]} job {r.job_a[:12]}" + (
            f" and job {r.job_b[:12]}" if r.job_b else ""
        )
        return f"{head}: {r.verdict}\n{self.comparison.summary()}"


def verified_manifest(keeper: Keeper, job: Job) -> dict[str, Any]:
    """The job's signed Statement, verified against the keys this keep trusts (not those
    the archive merely lists: anyone who can write the archive can list a key)."""
    entry = job.log_entry
    if entry is None:
        raise JobkeeperError(f"job {job.id[:12]} is {job.state}: it has no signed manifest")
    keys = keeper.trust.load().keys
    try:
        payload = verify_envelope(json.loads(entry.envelope), keys)
        return parse_statement(payload)
    except (VerificationError, ValueError) as exc:
        raise VerificationError(f"job {job.id[:12]}: its manifest does not verify: {exc}") from exc


def _counts(job: Job) -> dict[str, int]:
    counts = job.counts
    if not counts:
        raise JobkeeperError(f"job {job.id[:12]} has no counts (an exact run?) to compare")
    return counts


def _archive(
    keeper: Keeper, kind: str, a: Job, b: Job | None, comparison: Comparison,
    extra: dict[str, Any],
) -> ComparisonRecord:  # fmt: skip
    report = {
        "kind": kind,
        "jobA": a.id,
        "jobB": None if b is None else b.id,
        "jobKeyA": a.record.job_key,
        "jobKeyB": None if b is None else b.record.job_key,
        "comparedOn": dt.datetime.now(tz=dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        **extra,
        "result": comparison.to_json(),
    }
    document = canonical_json(report)
    record = ComparisonRecord(
        id=uuid.uuid4().hex, kind=kind, job_a=a.id, job_b=None if b is None else b.id,
        verdict=comparison.verdict, report=document.decode(),
    )  # fmt: skip
    sealer = keeper.sealer()
    envelope = sealer.seal_comparison(document, {"kind": kind, "verdict": comparison.verdict,
                                                  "jobKeyA": report["jobKeyA"],
                                                  "jobKeyB": report["jobKeyB"]})  # fmt: skip
    keeper.store.record_comparison(record, envelope, sealer.fingerprint, sealer.appender)
    return record


def compare_jobs(keeper: Keeper, a: Job, b: Job, *, alpha: float = 0.01) -> Judgement:
    """Are two jobs' counts consistent with one distribution?"""
    comparison = compare_counts(_counts(a), _counts(b), alpha=alpha)
    return Judgement(_archive(keeper, "pair", a, b, comparison, {"alpha": alpha}), comparison)


def ideal_distribution(keeper: Keeper, job: Job) -> dict[str, float]:
    """The exact noiseless distribution of the job's circuit, from its manifest."""
    statement = verified_manifest(keeper, job)
    text = statement["predicate"]["circuit"]["canonicalText"]
    circuit = parse_qasm(text, filename=f"manifest of job {job.id[:12]}")
    result = ideal_simulator().execute(Task(circuit=circuit, shots=1, exact=True,
                                            circuit_text=text))  # fmt: skip
    return dict(result.probabilities or {})


def compare_ideal(keeper: Keeper, a: Job, *, alpha: float = 0.01) -> Judgement:
    """Is a job's sample consistent with its circuit's exact noiseless distribution?"""
    comparison = compare_to_distribution(_counts(a), ideal_distribution(keeper, a), alpha=alpha)
    record = _archive(keeper, "ideal", a, None, comparison, {"alpha": alpha})
    return Judgement(record, comparison)


def rerun(
    keeper: Keeper, original: Job, *, backend: str | None = None, seed: int | None = None,
    alpha: float = 0.01,
) -> Judgement:  # fmt: skip
    """Run a job again from its signed manifest alone, then judge the two results."""
    predicate = verified_manifest(keeper, original)["predicate"]
    parameters = predicate.get("parameters", {})
    used_seed = int(predicate["seed"]) if predicate.get("seed") is not None else None
    name = backend or predicate["backend"]["name"]
    new_seed = used_seed if seed is None else seed
    item = keeper.run_many(
        [predicate["circuit"]["canonicalText"]], backend=name, shots=int(predicate["shots"]),
        seed=new_seed, exact=bool(parameters.get("exact", False)),
        options=parameters.get("options") or {}, rerun_of=original.id,
    )[0]  # fmt: skip
    again = item.job
    if again.state != "done":
        raise JobkeeperError(
            f"the rerun (job {again.id[:12]}) ended {again.state}: {again.record.error}"
        )
    same_setup = name == predicate["backend"]["name"] and new_seed == used_seed
    deterministic = same_setup and keeper.backend(name).info.deterministic
    comparison = compare_counts(_counts(original), _counts(again), alpha=alpha,
                                deterministic=deterministic)  # fmt: skip
    extra = {"alpha": alpha, "backend": name, "seed": None if new_seed is None else str(new_seed),
             "sameSetup": same_setup, "deterministic": deterministic}  # fmt: skip
    record = _archive(keeper, "rerun", original, again, comparison, extra)
    return Judgement(record, comparison, rerun_job=again.id)
