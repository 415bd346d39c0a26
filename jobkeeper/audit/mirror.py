"""The archive's columns against the statements that sign them.

A done job's facts live twice: in the signed manifest (the log entry's in-toto Statement)
and in the columns every reader shows (``jobs``, ``attempts``, ``results``,
``comparisons``). Editing a column leaves every signature valid, so ``verify`` compares
each mirrored column with what the statement signs and reports each difference. What no
statement signs (labels, the source file's name, the seed the user asked for before it
was resolved, a queued job) is an annotation: readers mark it unsigned.

Times: the submitted and started times are signed exactly (to the millisecond); the
finished time is signed by the worker just before the archive records its own, so the
archive's may lie up to :data:`FINISH_SLACK` seconds after the signed one (two clocks).
"""

from __future__ import annotations

import base64
import binascii
import json
from collections.abc import Iterable, Mapping, Sequence
from typing import TYPE_CHECKING, Any

from jobkeeper.audit.sealing import rfc3339
from jobkeeper.exceptions import DamagedRecord, VerificationError
from jobkeeper.hashing import sha256_tag
from jobkeeper.provenance.batch import BATCH_PREDICATE_TYPE, point_statement
from jobkeeper.provenance.manifest import (
    COMPARISON_PREDICATE_TYPES,
    RUN_PREDICATE_TYPE,
    RUN_PREDICATE_TYPES,
    circuit_layout,
)
from jobkeeper.provenance.report import VerifyReport

if TYPE_CHECKING:
    from jobkeeper.store import Attempt, ComparisonRecord, JobRecord, LogEntry, Store

#: How long after the signed finishing time the archive may record the job as finished.
FINISH_SLACK = 300.0
#: What readers print beside a value no statement signs.
UNSIGNED = "(unsigned)"


def statement_of(envelope: bytes) -> dict[str, Any] | None:
    """The Statement inside a stored envelope, unverified (the log check verifies the
    signature; this only reads what it says). None when it cannot be read."""
    try:
        env = json.loads(envelope)
        payload = base64.b64decode(env["payload"], validate=True)
        statement = json.loads(payload)
    except (KeyError, TypeError, ValueError, binascii.Error):
        return None
    return statement if isinstance(statement, dict) else None


def _time(seconds: float | None) -> str | None:
    try:
        return rfc3339(seconds)
    except (OverflowError, OSError, ValueError, TypeError):
        return f"unreadable time {seconds!r}"


def _seconds(stamp: Any) -> float | None:
    import datetime as dt

    if not isinstance(stamp, str):
        return None
    try:
        return dt.datetime.fromisoformat(stamp.replace("Z", "+00:00")).timestamp()
    except ValueError:
        return None


def job_differences(
    job: JobRecord, predicate: Mapping[str, Any], attempts: Sequence[Attempt],
    metadata_text: str | None, probabilities: Mapping[str, float] | None, *,
    layout_signed: bool = True,
) -> list[str]:  # fmt: skip
    """Each column of ``job`` (and its attempts and result) that differs from the signed
    run predicate, as "what: archive says X, manifest signs Y"."""
    spec = job.spec
    circuit = predicate.get("circuit") or {}
    parameters = predicate.get("parameters") or {}
    backend = predicate.get("backend") or {}
    times = predicate.get("timestamps") or {}
    code = spec.code_version if spec.code_version is not None else {"absent": True}
    pairs: list[tuple[str, Any, Any]] = [
        ("backend", spec.backend, backend.get("name")),
        ("shots", spec.shots, predicate.get("shots")),
        ("seed", None if spec.seed is None else str(spec.seed), predicate.get("seed")),
        ("repeat", spec.repeat, parameters.get("repeat")),
        ("exact", spec.exact, parameters.get("exact")),
        ("options", dict(spec.options), parameters.get("options")),
        # A batch point's circuit is signed by its hash alone (the template gives the text).
        (
            "circuit",
            spec.circuit_text
            if "canonicalText" in circuit
            else sha256_tag(spec.circuit_text.encode("utf-8")),
            circuit.get("canonicalText", circuit.get("hash")),
        ),
        ("circuit hash", spec.circuit_hash, circuit.get("hash")),
        ("source hash", spec.source_hash, circuit.get("sourceHash")),
        ("code version", dict(code), predicate.get("codeVersion")),
        ("submitted", _time(job.created_at), times.get("submittedOn")),
        ("started", _time(job.started_at), times.get("startedOn")),
        ("attempts", [_attempt(a) for a in attempts], predicate.get("attempts", [])),
    ]
    if spec.bindings is not None or "bindings" in predicate or "template" in predicate:
        template = predicate.get("template") or {}
        pairs += [
            ("bindings", None if spec.bindings is None else spec.bindings.texts(),
             predicate.get("bindings")),
            ("template hash", spec.template_hash, template.get("hash")),
            ("template", spec.template_text, template.get("text")),
        ]  # fmt: skip
    if "probabilities" in parameters or probabilities is not None:
        signed = parameters.get("probabilities")
        pairs.append(("probabilities", None if probabilities is None else dict(probabilities),
                      None if signed is None else dict(signed)))  # fmt: skip
    if layout_signed:  # run predicate v2: the register layout, names included
        layout = circuit_layout(spec.circuit_text, spec.register_names).to_json()
        pairs.append(("register layout", layout, predicate.get("registers")))
    if "resultMetadata" in predicate:
        digest = None if metadata_text is None else sha256_tag(metadata_text.encode())
        pairs.append(("result metadata (digest)", digest, predicate["resultMetadata"]))
    found = [f"{what}: the archive says {_short(have)}, the manifest signs {_short(want)}"
             for what, have, want in pairs if have != want]  # fmt: skip
    finished = _seconds(times.get("finishedOn"))
    at = job.finished_at
    if finished is not None and (at is None or not finished - 1.0 <= at <= finished + FINISH_SLACK):
        found.append(
            f"finished: the archive says {_time(at)}, the manifest signs {times['finishedOn']} "
            f"(the archive's may only be up to {FINISH_SLACK:.0f} s later)"
        )
    return found


def _attempt(a: Attempt) -> dict[str, Any]:
    # As the sealer writes them (jobkeeper.audit.sealing.Sealer.predicate).
    return {
        "number": a.number,
        "startedOn": _time(a.at),
        "outcome": "retried in the call" if a.in_call else "retried",
        "errorClass": a.error_class,
        "message": a.message,
    }


def _short(value: Any) -> str:
    text = json.dumps(value, sort_keys=True, default=str)
    return text if len(text) <= 60 else text[:57] + "…"


def comparison_differences(record: ComparisonRecord, predicate: Mapping[str, Any]) -> list[str]:
    """The comparison row's columns against its signed predicate and signed report."""
    try:
        report = json.loads(record.report)
    except ValueError:
        return []  # the report is the signed subject: its digest check reports it
    pairs = [
        ("kind", record.kind, predicate.get("kind")),
        ("verdict", record.verdict, predicate.get("verdict")),
        ("job A", record.job_a, report.get("jobA") if isinstance(report, dict) else None),
        ("job B", record.job_b, report.get("jobB") if isinstance(report, dict) else None),
    ]
    return [f"{what}: the archive says {_short(have)}, the manifest signs {_short(want)}"
            for what, have, want in pairs if have != want]  # fmt: skip


def check_mirrors(
    store: Store, entries: Iterable[LogEntry], wanted: Iterable[str] | None, report: VerifyReport
) -> None:
    """Compare every mirrored column of the wanted done jobs (all when None) and of every
    comparison with its signed statement; one problem per difference."""
    chosen = None if wanted is None else set(wanted)
    comparisons = {c.id: c for c in store.comparisons()}
    runs: dict[str, tuple[LogEntry, dict[str, Any]]] = {}  # job id → its run statement
    members = store.batch_members()
    batches: dict[str, tuple[LogEntry, dict[str, Any]]] = {}  # point → its batch's
    for entry in entries:
        statement = statement_of(entry.envelope)
        if statement is None:
            continue  # unreadable: the log check reports it
        kind = statement.get("predicateType")
        predicate = statement.get("predicate")
        if not isinstance(predicate, dict):
            continue
        if kind == BATCH_PREDICATE_TYPE:
            for job_id in members.get(entry.job_id, ()):
                if chosen is None or job_id in chosen:
                    batches[job_id] = (entry, statement)
            continue
        if kind in COMPARISON_PREDICATE_TYPES and entry.job_id in comparisons:
            for text in comparison_differences(comparisons[entry.job_id], predicate):
                report.problems.append(f"comparison {entry.job_id[:12]}: {text}")
        elif kind in RUN_PREDICATE_TYPES and (chosen is None or entry.job_id in chosen):
            runs[entry.job_id] = (entry, statement)
    records = _records(store, [*runs, *batches], report)
    for job_id, (batch_entry, batch) in batches.items():
        job = records.get(job_id)
        if job is None:
            continue
        try:
            runs[job_id] = (batch_entry, point_statement(batch, job.job_key))
        except VerificationError:
            report.problems.append(
                f"job {job_id[:12]}: its batch's statement does not attest its job key"
            )
    texts = store.all_result_texts()
    every_attempt = store.all_attempts()  # all of them: an added row is a change too
    unsigned_metadata = 0
    for job_id, (_, statement) in runs.items():
        predicate = statement["predicate"]
        job = records.get(job_id)
        if job is None or job.state != "done":
            continue  # reported by the log check (an entry for a job that is not done)
        stored, metadata = texts.get(job_id, (None, None))
        try:
            probabilities = None if stored is None else json.loads(stored)
        except ValueError:
            report.problems.append(f"job {job_id[:12]}: its stored probabilities are unreadable")
            continue
        attempts = every_attempt.get(job_id, [])
        layout_signed = statement.get("predicateType") == RUN_PREDICATE_TYPE
        for text in job_differences(
            job, predicate, attempts, metadata, probabilities, layout_signed=layout_signed
        ):
            report.problems.append(f"job {job_id[:12]}: {text}")
        unsigned_metadata += "resultMetadata" not in predicate
    if unsigned_metadata:
        report.warnings.append(
            f"{unsigned_metadata} job(s) were sealed before result metadata was signed: their "
            "metadata is shown as unsigned"
        )


def _records(store: Store, ids: list[str], report: VerifyReport) -> dict[str, JobRecord]:
    """The jobs' rows; a row that cannot be read is a problem, the others still count."""
    try:
        return {job.id: job for job in store.get_many(ids)} if ids else {}
    except DamagedRecord:
        pass
    out = {}
    for job_id in ids:
        try:
            out.update({job.id: job for job in store.get_many([job_id])})
        except DamagedRecord as exc:
            report.problems.append(str(exc))
    return out


__all__ = [
    "FINISH_SLACK",
    "UNSIGNED",
    "check_mirrors",
    "comparison_differences",
    "job_differences",
    "statement_of",
]
