"""Sealing a batch of sweep points: one statement, one signature, one log entry.

Each point's fields are those :meth:`Sealer.predicate` gives a single job, so that a
point read out of the batch (:func:`jobkeeper.provenance.batch.point_statement`) is
checked exactly as a single job's record is; what every point shares (the template, the
backend, the software) is written once. The circuit's canonical text is not repeated per
point: the template and the point's bindings give it, and the signed circuit hash fixes it.
"""

from __future__ import annotations

import uuid
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from jobkeeper.audit.sealing import Sealer
from jobkeeper.backend import BackendInfo, Result
from jobkeeper.provenance.batch import SHARED, build_batch_statement
from jobkeeper.provenance.dsse import PAYLOAD_TYPE, envelope_bytes, sign_envelope
from jobkeeper.provenance.manifest import counts_digest, statement_bytes
from jobkeeper.store import Attempt, Claim, Completion

#: The kind prefix of a batch's id (its log entry's subject id).
BATCH_PREFIX = "bt-"


@dataclass(frozen=True)
class SealedBatch:
    """A signed batch ready to archive: each point's completion (its result; no envelope
    of its own) and the batch's one envelope."""

    id: str
    completions: tuple[Completion, ...]
    envelope: bytes
    signer: str


def seal_batch(
    sealer: Sealer,
    points: Sequence[tuple[Claim, Result]],
    info: BackendInfo,
    attempts: Mapping[str, Sequence[Attempt]],
) -> SealedBatch:
    """One signed statement over every point (claim and result) of a batch."""
    shared: dict[str, Any] = {}
    signed: list[tuple[str, dict[str, Any]]] = []
    completions = []
    for claim, result in points:
        predicate = sealer.predicate(claim, result, info, attempts.get(claim.job.id, ()))
        counts = predicate.pop("counts")
        predicate["circuit"] = {
            k: v for k, v in predicate["circuit"].items() if k != "canonicalText"
        }
        for name in SHARED:
            value = predicate.get(name)
            if name not in shared:
                shared[name] = value
            if value == shared[name]:
                predicate.pop(name, None)  # the point's is the batch's: written once
        signed.append((counts_digest(counts), predicate))
        completions.append(
            Completion(
                job_id=claim.job.id,
                token=claim.token,
                result_counts=result.counts,
                result_probabilities=result.probabilities,
                metadata=dict(result.metadata),
                envelope=b"",
                signer=sealer.fingerprint,
            )
        )
    statement = build_batch_statement(shared, signed)
    envelope = sign_envelope(
        statement_bytes(statement), PAYLOAD_TYPE, sealer.key, keyid=sealer.fingerprint
    )
    return SealedBatch(
        BATCH_PREFIX + uuid.uuid4().hex, tuple(completions), envelope_bytes(envelope),
        sealer.fingerprint,
    )  # fmt: skip
