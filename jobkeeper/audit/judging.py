"""Judging results: reruns from the manifest alone, and comparisons of count tables
(``jobkeeper rerun``, ``jobkeeper compare``). Every judgement is archived, signed and
appended to the log like a job, and ``show`` lists those that involve a job.

A rerun reads nothing but the original job's signed manifest (verified first): the
canonical circuit text, shots, the seed the backend was given, the options. On the same
deterministic backend with the same seed the counts must be identical; anywhere else the
two count tables are compared statistically (:mod:`jobkeeper.stats`).

These functions work on a store and a sealer; :class:`jobkeeper.Keeper` calls them (and,
for a rerun, submits and runs the new job between :func:`rerun_plan` and
:func:`judge_rerun`).
"""

from __future__ import annotations

import datetime as dt
import json
import uuid
from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import partial
from typing import TYPE_CHECKING, Any

from jobkeeper.audit.reading import signed_reading
from jobkeeper.backend import Task
from jobkeeper.backends import ideal_simulator
from jobkeeper.circuit import parse_qasm
from jobkeeper.exceptions import ConfigError, JobkeeperError, VerificationError
from jobkeeper.hashing import canonical_json
from jobkeeper.options import SubmitOptions
from jobkeeper.provenance.batch import job_statement
from jobkeeper.provenance.dsse import verify_envelope
from jobkeeper.stats import Comparison, compare_counts, compare_to_distribution
from jobkeeper.store import ComparisonRecord

if TYPE_CHECKING:
    from jobkeeper.audit.sealing import Sealer
    from jobkeeper.store import JobRecord, Store


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


def check_alpha(alpha: float) -> None:
    """The significance level of a judgement: above 0, at most 0.5."""
    if isinstance(alpha, bool) or not 0 < alpha <= 0.5:
        raise ConfigError(f"alpha must be above 0 and at most 0.5, got {alpha}")


def verified_manifest(store: Store, job: JobRecord, keys: Mapping[str, bytes]) -> dict[str, Any]:
    """The job's signed Statement, verified against ``keys``: the keys the keep trusts (not
    those the archive merely lists: anyone who can write the archive can list a key)."""
    entry = store.log_entry_for(job.id)
    if entry is None:
        raise JobkeeperError(f"job {job.id[:12]} is {job.state}: it has no signed manifest")
    try:
        payload = verify_envelope(json.loads(entry.envelope), keys)
        return with_circuit_text(job_statement(payload, job.job_key))
    except (VerificationError, ValueError) as exc:
        raise VerificationError(f"job {job.id[:12]}: its manifest does not verify: {exc}") from exc


def with_circuit_text(statement: dict[str, Any]) -> dict[str, Any]:
    """A batch point's statement with its circuit's canonical text, which the batch does
    not repeat per point: the signed template bound with the signed bindings gives it, and
    it must have the signed circuit hash."""
    predicate = statement["predicate"]
    circuit = predicate.get("circuit") or {}
    if "canonicalText" in circuit or not isinstance(predicate.get("template"), dict):
        return statement
    from jobkeeper.circuit import Template, canonical_text
    from jobkeeper.hashing import sha256_tag
    from jobkeeper.sweeps.bindings import bind_settings

    template = Template(str(predicate["template"].get("text", "")))
    given = [f"{name}={text}" for name, text in (predicate.get("bindings") or {}).items()]
    text = canonical_text(template.bind(bind_settings(template.inputs, given).numbers()))
    if sha256_tag(text.encode("utf-8")) != circuit.get("hash"):
        raise VerificationError("the signed template and bindings do not give the signed circuit")
    predicate["circuit"] = {**circuit, "canonicalText": text}
    return statement


def _counts(store: Store, job: JobRecord, keys: Mapping[str, bytes]) -> dict[str, int]:
    """The job's signed counts, keyed as today's keys are (a first-version job's keys
    rewritten by its layout), so results of either version compare outcome by outcome."""
    result, layout = signed_reading(store, job.id, keys)  # refused unless they are signed
    counts = None if result is None else result.counts
    if not counts or layout is None:
        raise JobkeeperError(f"job {job.id[:12]} has no counts (an exact run?) to compare")
    return layout.current_counts(counts)


def _archive(
    store: Store, sealer: Sealer, kind: str, a: JobRecord, b: JobRecord | None,
    comparison: Comparison, extra: dict[str, Any],
) -> ComparisonRecord:  # fmt: skip
    report = {
        "kind": kind,
        "jobA": a.id,
        "jobB": None if b is None else b.id,
        "jobKeyA": a.job_key,
        "jobKeyB": None if b is None else b.job_key,
        "comparedOn": dt.datetime.now(tz=dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        **extra,
        "result": comparison.to_json(),
    }
    document = canonical_json(report)
    record = ComparisonRecord(
        id=uuid.uuid4().hex, kind=kind, job_a=a.id, job_b=None if b is None else b.id,
        verdict=comparison.verdict, report=document.decode(),
    )  # fmt: skip
    envelope = sealer.seal_comparison(document, {"kind": kind, "verdict": comparison.verdict,
                                                  "jobKeyA": report["jobKeyA"],
                                                  "jobKeyB": report["jobKeyB"]})  # fmt: skip
    sealer.commit(partial(store.record_comparison, record, envelope, sealer.fingerprint))
    return record


def compare_jobs(
    store: Store, sealer: Sealer, a: JobRecord, b: JobRecord, keys: Mapping[str, bytes], *,
    alpha: float = 0.01,
) -> Judgement:  # fmt: skip
    """Are two jobs' counts consistent with one distribution?"""
    comparison = compare_counts(_counts(store, a, keys), _counts(store, b, keys), alpha=alpha)
    record = _archive(store, sealer, "pair", a, b, comparison, {"alpha": alpha})
    return Judgement(record, comparison)


def ideal_distribution(store: Store, job: JobRecord, keys: Mapping[str, bytes]) -> dict[str, float]:
    """The exact noiseless distribution of the job's circuit, from its manifest."""
    statement = verified_manifest(store, job, keys)
    text = statement["predicate"]["circuit"]["canonicalText"]
    circuit = parse_qasm(text, filename=f"manifest of job {job.id[:12]}")
    result = ideal_simulator().execute(Task(circuit=circuit, shots=1, exact=True,
                                            circuit_text=text))  # fmt: skip
    return dict(result.probabilities or {})


def compare_ideal(
    store: Store, sealer: Sealer, a: JobRecord, keys: Mapping[str, bytes], *, alpha: float = 0.01
) -> Judgement:
    """Is a job's sample consistent with its circuit's exact noiseless distribution?"""
    ideal = ideal_distribution(store, a, keys)
    comparison = compare_to_distribution(_counts(store, a, keys), ideal, alpha=alpha)
    record = _archive(store, sealer, "ideal", a, None, comparison, {"alpha": alpha})
    return Judgement(record, comparison)


@dataclass(frozen=True)
class RerunPlan:
    """What a rerun submits, read from the original's verified manifest alone."""

    circuit_text: str
    options: SubmitOptions
    #: the seed the original ran with, as its manifest signs it
    original_seed: int | None
    original_backend: str
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def same_setup(self) -> bool:
        return (
            self.options.backend == self.original_backend
            and self.options.seed == self.original_seed
        )


def rerun_plan(
    store: Store, original: JobRecord, keys: Mapping[str, bytes], *, backend: str | None = None,
    seed: int | None = None,
) -> RerunPlan:  # fmt: skip
    """The circuit and options of a rerun: the manifest's, unless another backend or seed
    is asked for."""
    predicate = verified_manifest(store, original, keys)["predicate"]
    parameters = predicate.get("parameters", {})
    used_seed = int(predicate["seed"]) if predicate.get("seed") is not None else None
    options = SubmitOptions.of(
        backend=backend or predicate["backend"]["name"], shots=int(predicate["shots"]),
        seed=used_seed if seed is None else seed, exact=bool(parameters.get("exact", False)),
        backend_options=parameters.get("options") or {},
    )  # fmt: skip
    return RerunPlan(predicate["circuit"]["canonicalText"], options, used_seed,
                     predicate["backend"]["name"])  # fmt: skip


def judge_rerun(
    store: Store, sealer: Sealer, plan: RerunPlan, original: JobRecord, again: JobRecord,
    keys: Mapping[str, bytes], *, deterministic_backend: bool, alpha: float = 0.01,
) -> Judgement:  # fmt: skip
    """Judge a rerun's counts against the original's, and archive the judgement."""
    if again.state != "done":
        raise JobkeeperError(f"the rerun (job {again.id[:12]}) ended {again.state}: {again.error}")
    deterministic = plan.same_setup and deterministic_backend
    comparison = compare_counts(_counts(store, original, keys), _counts(store, again, keys),
                                alpha=alpha,
                                deterministic=deterministic)  # fmt: skip
    seed = plan.options.seed
    extra = {"alpha": alpha, "backend": plan.options.backend,
             "seed": None if seed is None else str(seed), "sameSetup": plan.same_setup,
             "deterministic": deterministic}  # fmt: skip
    record = _archive(store, sealer, "rerun", original, again, comparison, extra)
    return Judgement(record, comparison, rerun_job=again.id)
