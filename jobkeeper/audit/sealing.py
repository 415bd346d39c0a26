"""Sealing a finished job: manifest → DSSE envelope → log entry → signed checkpoint.

The worker calls :meth:`Sealer.seal` outside any transaction (signing is the slow part)
and finishes through :meth:`Sealer.commit`, which hands :meth:`Sealer.appender` to the
store (called inside the finishing transaction to extend the Merkle log and sign the new
checkpoint) and, once the transaction has committed, writes that checkpoint to the keep's
witness. The log's saved state
is its compact range: the roots of the perfect subtrees that make up the tree (at most
one per bit of the size), so an append costs O(log n) hashes however long the log is.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import functools
import platform
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any, TypeVar

import numpy as np
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

from jobkeeper._version import __version__
from jobkeeper.audit.witness import write_witness
from jobkeeper.backend import BackendInfo, Result
from jobkeeper.hashing import sha256_tag
from jobkeeper.provenance.checkpoint import PREVIOUS_SIZE, format_checkpoint, sign_note
from jobkeeper.provenance.dsse import PAYLOAD_TYPE, envelope_bytes, sign_envelope
from jobkeeper.provenance.keys import fingerprint
from jobkeeper.provenance.manifest import (
    COMPARISON_NAME,
    COMPARISON_PREDICATE_TYPE,
    STATEMENT_TYPE,
    build_statement,
    circuit_layout,
    statement_bytes,
)
from jobkeeper.provenance.merkle import leaf_hash, node_hash
from jobkeeper.spec import JobSpec
from jobkeeper.store import Attempt, Claim, Completion, LogAppender, metadata_text

HASH_SIZE = 32
T = TypeVar("T")


def rfc3339(seconds: float | None) -> str | None:
    if seconds is None:
        return None
    moment = dt.datetime.fromtimestamp(seconds, tz=dt.UTC).replace(tzinfo=None)
    return moment.isoformat(timespec="milliseconds") + "Z"


def software_versions() -> dict[str, str]:
    return dict(_software_versions())


@functools.cache
def _software_versions() -> dict[str, str]:
    return {
        "jobkeeper": __version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "platform": f"{sys.platform}-{platform.machine()}",
    }


# -- the compact range -------------------------------------------------------------------


def _unpack(state: bytes | None) -> list[tuple[int, bytes]]:
    if not state:
        return []
    step = 1 + HASH_SIZE
    return [(state[i], state[i + 1 : i + step]) for i in range(0, len(state), step)]


def _pack(frontier: Sequence[tuple[int, bytes]]) -> bytes:
    return b"".join(bytes([height]) + digest for height, digest in frontier)


def frontier_append(frontier: list[tuple[int, bytes]], leaf: bytes) -> None:
    frontier.append((0, leaf))
    while len(frontier) > 1 and frontier[-1][0] == frontier[-2][0]:
        (height, right), (_, left) = frontier.pop(), frontier.pop()
        frontier.append((height + 1, node_hash(left, right)))


def frontier_root(frontier: Sequence[tuple[int, bytes]]) -> bytes:
    """RFC 9162 MTH: the perfect subtrees of the size's binary decomposition, folded from
    the right (a lone right subtree is promoted, never duplicated)."""
    if not frontier:
        import hashlib

        return hashlib.sha256(b"").digest()
    root = frontier[-1][1]
    for _, digest in reversed(frontier[:-1]):
        root = node_hash(digest, root)
    return root


def log_state_of(leaves: Sequence[bytes]) -> bytes:
    """The saved log state (compact range) of a log with these leaf hashes."""
    frontier: list[tuple[int, bytes]] = []
    for leaf in leaves:
        frontier_append(frontier, leaf)
    return _pack(frontier)


def inputs_predicate(spec: JobSpec) -> dict[str, Any]:
    """What a run predicate signs of a circuit bound from a program with inputs: the
    template (hash and text) and each input's value as its text (a number is read from
    the text by the type the template declares; RFC 8785 could not carry every integer)."""
    if spec.bindings is None:
        return {}
    return {
        "template": {"hash": spec.template_hash, "text": spec.template_text},
        "bindings": spec.bindings.texts(),
    }


class Sealer:
    """Signs manifests and checkpoints with one keep's active key. With a ``witness``
    path, :meth:`commit` records each committed checkpoint there (see
    :mod:`jobkeeper.audit.witness`)."""

    def __init__(self, key: Ed25519PrivateKey, *, origin: str, witness: Path | None = None) -> None:
        self.key = key
        self.fingerprint = fingerprint(key)
        self.origin = origin
        self.witness = witness
        self._signed: str | None = None  # the note of the transaction under way

    def commit(self, step: Callable[[LogAppender], T]) -> T:
        """Run one store call that appends to the log with :meth:`appender` (``finish``,
        ``record_comparison``); once it has committed, write its checkpoint to the
        witness. A checkpoint whose transaction did not commit is never written."""
        self._signed = None
        try:
            out = step(self.appender)
            note, self._signed = self._signed, None
        except BaseException:
            self._signed = None
            raise
        if note is not None and self.witness is not None:
            # The archive holds the result; a witness that stays behind is still one the
            # log extends (verify brings it forward). Never fail a job for it.
            with contextlib.suppress(OSError):
                write_witness(self.witness, note)
        return out

    def predicate(
        self, claim: Claim, result: Result, info: BackendInfo, attempts: Sequence[Attempt]
    ) -> dict[str, Any]:
        job = claim.job
        spec = job.spec
        parameters: dict[str, Any] = {
            "repeat": spec.repeat,
            "exact": spec.exact,
            "options": dict(spec.options),
        }
        if result.probabilities is not None:
            parameters["probabilities"] = dict(result.probabilities)
        calibration = result.metadata.get("calibration", info.calibration)
        return {
            **inputs_predicate(spec),
            "jobKey": job.job_key,
            "circuit": {
                "canonicalText": spec.circuit_text,
                "hash": spec.circuit_hash,
                "sourceHash": spec.source_hash,
            },
            "parameters": parameters,
            "shots": spec.shots,
            # The seed resolved at submission and given to the backend (whether or not the
            # backend echoes it); a string, as RFC 8785 numbers stop at 2^53-1.
            "seed": str(spec.seed),
            "backend": {
                "name": info.name,
                "kind": info.kind,
                "version": info.version,
                "configHash": info.config_hash or None,
                "calibration": None if calibration is None else dict(calibration),
            },
            "software": software_versions(),
            "codeVersion": dict(spec.code_version or {"absent": True}),
            "timestamps": {
                "submittedOn": rfc3339(job.created_at),
                "startedOn": rfc3339(job.started_at),
                "finishedOn": rfc3339(dt.datetime.now(tz=dt.UTC).timestamp()),
            },
            "attempts": [
                {
                    "number": a.number,
                    "startedOn": rfc3339(a.at),
                    "outcome": "retried in the call" if a.in_call else "retried",
                    "errorClass": a.error_class,
                    "message": a.message,
                }
                for a in attempts
            ],
            # The digest of the result's metadata as the archive keeps it (the metadata
            # may hold what RFC 8785 cannot carry, such as a device's 64-bit integers).
            "resultMetadata": sha256_tag(metadata_text(result.metadata).encode()),
            # How the counts' keys are laid out (run predicate v2): the registers in
            # declaration order, with the names the user gave them.
            "registers": circuit_layout(spec.circuit_text, spec.register_names).to_json(),
            # As the backend gave them (a dict, or a CountTable that writes its own JSON).
            "counts": result.counts if result.counts is not None else {},
        }

    def seal(
        self, claim: Claim, result: Result, info: BackendInfo, attempts: Sequence[Attempt]
    ) -> Completion:
        predicate = self.predicate(claim, result, info, attempts)
        statement = build_statement(predicate["counts"], predicate)
        envelope = sign_envelope(
            statement_bytes(statement), PAYLOAD_TYPE, self.key, keyid=self.fingerprint
        )
        return Completion(
            job_id=claim.job.id,
            token=claim.token,
            result_counts=result.counts,
            result_probabilities=result.probabilities,
            metadata=dict(result.metadata),
            envelope=envelope_bytes(envelope),
            signer=self.fingerprint,
        )

    def seal_comparison(self, report: bytes, predicate: dict[str, Any]) -> bytes:
        """A signed envelope whose subject is a comparison's report document."""
        import hashlib

        statement = {
            "_type": STATEMENT_TYPE,
            "subject": [
                {"name": COMPARISON_NAME, "digest": {"sha256": hashlib.sha256(report).hexdigest()}}
            ],
            "predicateType": COMPARISON_PREDICATE_TYPE,
            "predicate": predicate,
        }
        return envelope_bytes(
            sign_envelope(
                statement_bytes(statement), PAYLOAD_TYPE, self.key, keyid=self.fingerprint
            )
        )

    def appender(
        self, state: bytes | None, size: int, envelopes: Sequence[bytes]
    ) -> tuple[list[bytes], bytes, bytes, str]:
        frontier = _unpack(state)
        leaves = [leaf_hash(envelope) for envelope in envelopes]
        for leaf in leaves:
            frontier_append(frontier, leaf)
        root = frontier_root(frontier)
        # The extension line links each checkpoint to the one before it (the log's size
        # before this append), so that a deleted checkpoint leaves a gap verify sees.
        text = format_checkpoint(self.origin, size + len(leaves), root, [f"{PREVIOUS_SIZE} {size}"])
        note = sign_note(text, self.origin, self.key)
        self._signed = note
        return leaves, _pack(frontier), root, note
