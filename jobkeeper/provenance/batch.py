"""Batch statements: one in-toto Statement for many points of one sweep, sealed at once.

A batch of points (jobs bound from one template, run together by one worker) is signed
once and logged once. Its Statement (predicate type :data:`BATCH_PREDICATE_TYPE`) has one
subject per point — named by the point's job key, with the SHA-256 of its counts
document — and a predicate holding what the points share once (the template, the
backend, the software) and, per point, what is its own (job key, circuit hash, bindings,
seed, shots, parameters, code version, timestamps, attempts, the digest of its result
metadata). Every point is covered by exactly this one statement.

:func:`point_statement` reads one point out of a batch statement as the run statement a
single job would have had (its subject ``counts.json``, its predicate the shared fields
and its own), so that every reader of one job's signed record — the counts check, verify's
column checks, rerun — reads a point as it reads a job. Only the circuit's canonical text
is not repeated per point: the template and the bindings give it (the circuit hash signs
it).
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from typing import Any

from jobkeeper.exceptions import VerificationError
from jobkeeper.provenance.manifest import (
    COUNTS_NAME,
    RUN_PREDICATE_TYPE,
    RUN_PREDICATE_TYPES,
    STATEMENT_TYPE,
    parse_statement,
    predicate_type,
)

#: The predicate type of a batch statement: ``urn:jobkeeper:predicate:batch:v1``.
BATCH_PREDICATE_TYPE = predicate_type("batch", 1)
#: Fields of a batch predicate every point shares (the rest is in ``points``).
SHARED = ("template", "backend", "software", "registers")


def build_batch_statement(
    shared: Mapping[str, Any], points: list[tuple[str, dict[str, Any]]]
) -> dict[str, Any]:
    """The Statement of a batch: ``points`` are (counts digest as hex, the point's own
    predicate fields, ``jobKey`` among them), in the batch's order."""
    return {
        "_type": STATEMENT_TYPE,
        "subject": [
            {"name": point["jobKey"], "digest": {"sha256": digest}} for digest, point in points
        ],
        "predicateType": BATCH_PREDICATE_TYPE,
        "predicate": {**shared, "points": [point for _, point in points]},
    }


def batch_points(statement: Mapping[str, Any]) -> dict[str, dict[str, Any]]:
    """Job key → the point's own predicate fields (VerificationError if malformed)."""
    points = statement.get("predicate", {}).get("points")
    if not isinstance(points, list):
        raise VerificationError("batch statement has no list of points")
    out: dict[str, dict[str, Any]] = {}
    for i, point in enumerate(points):
        key = point.get("jobKey") if isinstance(point, dict) else None
        if not isinstance(key, str):
            raise VerificationError(f"batch point {i} has no job key")
        if key in out:
            raise VerificationError(f"batch point {i}: job key {key[:19]} appears twice")
        out[key] = point
    return out


def subject_digests(statement: Mapping[str, Any]) -> dict[str, str]:
    """Subject name → sha256 hex digest."""
    return {
        str(s.get("name")): str(s.get("digest", {}).get("sha256"))
        for s in statement.get("subject", [])
        if isinstance(s, dict)
    }


def point_statement(statement: Mapping[str, Any], job_key: str) -> dict[str, Any]:
    """The point ``job_key`` of a batch statement as a single job's run statement
    (VerificationError when the batch has no such point, or no subject for it)."""
    point = batch_points(statement).get(job_key)
    digest = subject_digests(statement).get(job_key)
    if point is None or digest is None:
        raise VerificationError("the batch statement does not attest this job key")
    shared = {k: v for k, v in statement["predicate"].items() if k != "points"}
    return {
        "_type": STATEMENT_TYPE,
        "subject": [{"name": COUNTS_NAME, "digest": {"sha256": digest}}],
        "predicateType": RUN_PREDICATE_TYPE,
        "predicate": {**shared, **point},
        "batch": True,
    }


def job_statement(payload: bytes, job_key: str) -> dict[str, Any]:
    """The run statement of one job from a verified payload: the statement itself, or the
    job's point of a batch statement (VerificationError when malformed or not this job's)."""
    statement = parse_statement(
        payload, predicate_types=(*RUN_PREDICATE_TYPES, BATCH_PREDICATE_TYPE)
    )
    if statement["predicateType"] == BATCH_PREDICATE_TYPE:
        return point_statement(statement, job_key)
    return statement


def check_batch_documents(
    statement: Mapping[str, Any], documents: Mapping[str, bytes], *, every: bool
) -> None:
    """Each stored counts document (job key → its exact bytes) has its subject's digest;
    with ``every``, the statement attests exactly these points (no fewer, no more)."""
    digests = subject_digests(statement)
    points = batch_points(statement)
    if set(digests) != set(points):
        raise VerificationError("the batch's subjects and points name different job keys")
    if every and set(documents) != set(digests):
        missing = len(set(digests) - set(documents))
        extra = len(set(documents) - set(digests))
        raise VerificationError(
            f"the batch attests {len(digests)} point(s); the archive holds {len(documents)} "
            f"for it ({missing} signed but not archived, {extra} archived but not signed)"
        )
    if not documents:
        raise VerificationError("no counts document is given for any point of the batch")
    for key, document in documents.items():
        want = digests.get(key)
        if want is None:
            raise VerificationError(f"the batch does not attest job key {key[:19]}…")
        got = hashlib.sha256(document).hexdigest()
        if got != want:
            raise VerificationError(
                f"counts digest mismatch for point {key[:19]}…: statement says sha256:{want}, "
                f"stored bytes give sha256:{got}"
            )
