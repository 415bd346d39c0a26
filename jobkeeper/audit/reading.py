"""The one check every reader of a result makes: the counts shown are the counts signed.

``counts``, ``show``, ``run``'s answer, ``rerun``, ``compare`` and the Python API
(:attr:`jobkeeper.Job.counts`) read a done job's result through :func:`signed_result`,
which checks on every read that the job's log entry is signed by a trusted key, that it
attests this job (its job key), and that the stored counts (and exact probabilities) are
the ones it signs. Anything else is refused with exit 1 and a loud message: a forged
count is never printed as a result. (The log's order, the checkpoints and the other
columns are ``verify``'s work; this is the quick check a read can afford.)
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

from jobkeeper.exceptions import DamagedRecord, VerificationError
from jobkeeper.provenance.batch import job_statement
from jobkeeper.provenance.dsse import verify_envelope
from jobkeeper.provenance.manifest import check_subject, register_layout

if TYPE_CHECKING:
    from jobkeeper.counts import RegisterLayout
    from jobkeeper.store import JobRecord, Store, StoredResult


def _refuse(job: JobRecord, why: str) -> VerificationError:
    return VerificationError(
        f"REFUSED: the result of job {job.id[:12]} is not shown: {why}. The archive was "
        "altered or damaged; run 'jobkeeper verify --all' to see what changed"
    )


def signed_result(store: Store, job_id: str, keys: Mapping[str, bytes]) -> StoredResult | None:
    """The stored result of the job, checked against its signed manifest (``keys``: the
    keys trusted here). None for a job with no result yet (not done). VerificationError
    when the result is not the signed one, or a done job has no signed record."""
    return signed_reading(store, job_id, keys)[0]


def signed_reading(
    store: Store, job_id: str, keys: Mapping[str, bytes]
) -> tuple[StoredResult | None, RegisterLayout | None]:
    """:func:`signed_result` and the register layout its manifest signs (how its count
    keys are laid out; None with no result)."""
    [job] = store.get_many([job_id])  # afresh: the caller's record may predate its end
    try:
        result = store.result(job.id)
    except DamagedRecord as exc:
        raise _refuse(job, str(exc)) from exc
    if job.state != "done":
        if result is not None:
            raise _refuse(job, f"the job is {job.state}, yet a result is archived for it")
        return None, None
    entry = store.log_entry_for(job.id)
    if result is None or entry is None:
        raise _refuse(job, "it is marked done, but its result or signed record is missing")
    try:
        payload = verify_envelope(json.loads(entry.envelope), keys)
        statement = job_statement(payload, job.job_key)
    except (VerificationError, ValueError) as exc:
        why = f"its signed record does not verify with the keys trusted here ({exc})"
        raise _refuse(job, why) from exc
    predicate: dict[str, Any] = statement["predicate"]
    if predicate.get("jobKey") != job.job_key:
        raise _refuse(job, "its signed record attests another job")
    try:
        check_subject(statement, result.counts or {})
    except VerificationError as exc:
        raise _refuse(job, f"its counts are not the signed ones ({exc})") from None
    signed = (predicate.get("parameters") or {}).get("probabilities")
    have = None if result.probabilities is None else dict(result.probabilities)
    if have != signed:
        raise _refuse(job, "its exact probabilities are not the signed ones")
    try:
        layout = register_layout(statement)
    except VerificationError as exc:
        raise _refuse(job, str(exc)) from None
    return result, layout


__all__ = ["signed_reading", "signed_result"]
