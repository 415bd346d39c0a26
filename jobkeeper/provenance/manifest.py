"""Run manifests: in-toto Statement v1 with jobkeeper's own predicate type.

The subject is the counts document (``counts.json``) by its SHA-256: the RFC 8785
canonical JSON of the counts object. The signed bytes are the canonical JSON of the
Statement, produced once here and never re-serialised afterwards.
"""

from __future__ import annotations

import hashlib
import os
import re
import subprocess
from collections.abc import Mapping, Sequence
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator
from pydantic.alias_generators import to_camel

from jobkeeper.counts import CountTable, RegisterLayout
from jobkeeper.exceptions import ProvenanceError, VerificationError
from jobkeeper.hashing import canonical_json, sha256_tag
from jobkeeper.provenance.dsse import strict_json_loads

STATEMENT_TYPE = "https://in-toto.io/Statement/v1"


def predicate_type(kind: str, version: int) -> str:
    """The predicate type URI of one kind of statement: a URN of the project's own
    (``urn:jobkeeper:predicate:<kind>:v<N>``), so the identifier depends on no domain;
    in-toto asks only for a URI with the major version at its end. Every kind of
    statement (runs, comparisons, and later kinds) is named by this one pattern."""
    return f"urn:jobkeeper:predicate:{kind}:v{version}"


#: A run, version 2: the predicate records the register layout of the counts' keys
#: (``registers``), which are written as :func:`jobkeeper.counts.key_columns` says.
RUN_PREDICATE_TYPE = predicate_type("run", 2)
PREDICATE_TYPE = RUN_PREDICATE_TYPE
#: Runs signed before that: keys of several registers wrote the last declared register
#: first, a space between registers. Still verified, with that meaning.
FIRST_RUN_PREDICATE_TYPE = "https://jobkeeper.dev/attestation/run/v1"
RUN_PREDICATE_TYPES = (RUN_PREDICATE_TYPE, FIRST_RUN_PREDICATE_TYPE)
COUNTS_NAME = "counts.json"
# Comparisons (reruns, backend against backend, against the ideal) are attested too: their
# subject is the comparison report document (RFC 8785 canonical JSON). Version 2 compares
# count keys in the register layout of today (first-version keys rewritten).
COMPARISON_PREDICATE_TYPE = predicate_type("comparison", 2)
FIRST_COMPARISON_PREDICATE_TYPE = "https://jobkeeper.dev/attestation/comparison/v1"
COMPARISON_PREDICATE_TYPES = (COMPARISON_PREDICATE_TYPE, FIRST_COMPARISON_PREDICATE_TYPE)
COMPARISON_NAME = "comparison.json"
PREDICATE_TYPES = RUN_PREDICATE_TYPES + COMPARISON_PREDICATE_TYPES
MAX_SAFE_INT = 2**53 - 1

_HEX64 = re.compile(r"[0-9a-f]{64}")
#: a classical register's line in canonical circuit text (jobkeeper.circuit.canonical)
_CREG = re.compile(r"^creg c\d+\[(\d+)\];$", re.MULTILINE)
_RFC3339_Z = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d{1,9})?Z")


# ---------------------------------------------------------------------------------------
# Predicate schema (lowerCamelCase on the wire, per the in-toto predicate guidelines)


class _Model(BaseModel):
    # Unknown fields are ignored, not refused: a v1 reader must accept later minor
    # versions (in-toto's monotonic rule); our writers only emit known fields.
    model_config = ConfigDict(
        alias_generator=to_camel, populate_by_name=True, extra="ignore", frozen=True
    )


def _check_timestamp(value: str | None) -> str | None:
    if value is not None and not _RFC3339_Z.fullmatch(value):
        raise ValueError(f"{value!r} is not an RFC 3339 UTC timestamp ending in 'Z'")
    return value


class CircuitRecord(_Model):
    canonical_text: str
    hash: str
    source_hash: str | None = None


class BackendRecord(_Model):
    name: str
    kind: str
    version: str
    config_hash: str | None = None
    calibration: dict[str, Any] | None = None


class SoftwareRecord(_Model):
    jobkeeper: str
    python: str
    numpy: str | None = None
    platform: str


class CodeVersion(_Model):
    commit: str
    dirty: bool
    diff_hash: str


class CodeVersionAbsent(_Model):
    absent: Literal[True] = True


class Timestamps(_Model):
    submitted_on: str
    started_on: str | None = None
    finished_on: str | None = None

    _ts = field_validator("submitted_on", "started_on", "finished_on")(_check_timestamp)


class Attempt(_Model):
    number: int
    started_on: str
    finished_on: str | None = None
    outcome: str  # "done", "transient", "permanent", "cancelled", "lease-lost", ...
    error_class: str | None = None
    message: str | None = None

    _ts = field_validator("started_on", "finished_on")(_check_timestamp)


class TemplateRecord(_Model):
    """The program a circuit was bound from: ``sha256:`` of its text, and the text."""

    hash: str
    text: str


class RegisterRecord(_Model):
    name: str
    width: int = Field(ge=1)


class RunPredicate(_Model):
    """The predicate of ``urn:jobkeeper:predicate:run:v2`` (and, without ``registers``,
    of the first version)."""

    job_key: str
    circuit: CircuitRecord
    parameters: dict[str, Any] = Field(default_factory=dict)
    shots: int = Field(ge=0, le=MAX_SAFE_INT)
    # A string: 64-bit seeds do not fit RFC 8785 numbers (|n| ≤ 2^53−1).
    seed: str | None = None
    backend: BackendRecord
    software: SoftwareRecord
    code_version: CodeVersion | CodeVersionAbsent
    timestamps: Timestamps
    attempts: list[Attempt] = Field(default_factory=list)
    #: the classical registers in declaration order: how the counts' keys are laid out
    registers: list[RegisterRecord] | None = None
    counts: dict[str, int]
    #: for a circuit bound from a program with inputs: the program, and each value's text
    template: TemplateRecord | None = None
    bindings: dict[str, str] | None = None

    @field_validator("seed")
    @classmethod
    def _seed_is_decimal(cls, value: str | None) -> str | None:
        if value is not None and not re.fullmatch(r"-?(0|[1-9][0-9]*)", value):
            raise ValueError("seed must be a decimal integer written as a string")
        return value

    def to_json(self) -> dict[str, Any]:
        """The predicate as a JSON-ready dict with wire (camelCase) names (``template``
        and ``bindings`` only for a circuit bound from a program with inputs)."""
        out = self.model_dump(mode="json", by_alias=True)
        for name in ("template", "bindings"):
            if out.get(name) is None:
                out.pop(name, None)
        return out


# ---------------------------------------------------------------------------------------
# Statement


def _check_counts(counts: Mapping[str, int]) -> dict[str, int]:
    if not isinstance(counts, Mapping):
        raise ProvenanceError("counts must be a mapping of bit string to count")
    clean: dict[str, int] = {}
    for key, value in counts.items():
        if not isinstance(key, str):
            raise ProvenanceError(f"counts key {key!r} is not a string")
        if isinstance(value, bool) or not isinstance(value, int) or not 0 <= value <= MAX_SAFE_INT:
            raise ProvenanceError(f"count of {key!r} is not an integer in 0..2^53−1: {value!r}")
        clean[key] = value
    return clean


def counts_document(counts: Mapping[str, int]) -> bytes:
    """The counts document: RFC 8785 canonical JSON of the counts object."""
    if isinstance(counts, CountTable):
        return counts.canonical_json()  # its keys and counts were checked when it was made
    return canonical_json(_check_counts(counts))


def counts_digest(counts: Mapping[str, int]) -> str:
    """Lowercase hex SHA-256 of the counts document (the subject digest)."""
    return hashlib.sha256(counts_document(counts)).hexdigest()


def build_statement(
    counts: Mapping[str, int], predicate: Mapping[str, Any] | RunPredicate
) -> dict[str, Any]:
    """An in-toto Statement v1 whose subject is the counts document.

    ``predicate`` may be a RunPredicate or a plain JSON-ready mapping. If it carries
    ``counts``, they must equal ``counts`` (ProvenanceError otherwise), so the subject and
    the raw counts in the predicate can never tell different stories.
    """
    pred = predicate.to_json() if isinstance(predicate, RunPredicate) else dict(predicate)
    if "counts" in pred and pred["counts"] is not counts and pred["counts"] != counts:
        raise ProvenanceError("predicate counts differ from the counts being attested")
    return {
        "_type": STATEMENT_TYPE,
        "subject": [{"name": COUNTS_NAME, "digest": {"sha256": counts_digest(counts)}}],
        "predicateType": RUN_PREDICATE_TYPE,
        "predicate": pred,
    }


def statement_bytes(statement: Mapping[str, Any]) -> bytes:
    """The signed bytes of a Statement: RFC 8785 canonical JSON. ProvenanceError if the
    statement holds something JSON cannot carry exactly (NaN, huge integers, ...)."""
    try:
        return canonical_json(dict(statement))
    except Exception as exc:  # rfc8785 raises its own error types and TypeError
        raise ProvenanceError(f"statement cannot be canonicalised: {exc}") from exc


def parse_statement(
    payload: bytes, *, predicate_types: tuple[str, ...] = RUN_PREDICATE_TYPES
) -> dict[str, Any]:
    """Parse and check verified payload bytes as a Statement; VerificationError names the field."""
    data = strict_json_loads(payload, "statement")
    if not isinstance(data, dict):
        raise VerificationError("statement is not a JSON object")
    if data.get("_type") != STATEMENT_TYPE:
        raise VerificationError(f"statement _type is {data.get('_type')!r}, not {STATEMENT_TYPE!r}")
    subject = data.get("subject")
    if not isinstance(subject, list) or not subject:
        raise VerificationError("statement subject is missing or empty")
    for i, item in enumerate(subject):
        digest = item.get("digest") if isinstance(item, dict) else None
        if not isinstance(digest, dict) or not digest:
            raise VerificationError(f"statement subject[{i}] has no digest")
        if "sha256" in digest and not (
            isinstance(digest["sha256"], str) and _HEX64.fullmatch(digest["sha256"])
        ):
            raise VerificationError(
                f"statement subject[{i}].digest.sha256 is not 64 lowercase hex digits"
            )
    if data.get("predicateType") not in predicate_types:
        raise VerificationError(
            f"statement predicateType {data.get('predicateType')!r} is not supported"
        )
    if not isinstance(data.get("predicate"), dict):
        raise VerificationError("statement predicate is missing or not an object")
    return data


def verify_subject(envelope_payload: bytes, counts: Mapping[str, int]) -> None:
    """Check that a verified Statement's counts.json subject digest equals the digest of
    ``counts``. Raises VerificationError on any mismatch or malformed statement."""
    check_subject(parse_statement(envelope_payload), counts)


def check_subject(statement: Mapping[str, Any], counts: Mapping[str, int]) -> None:
    """verify_subject for an already parsed (``parse_statement``) Statement."""
    try:
        want = counts_digest(counts)
    except ProvenanceError as exc:
        raise VerificationError(f"stored counts are malformed: {exc}") from exc
    named = [s for s in statement["subject"] if s.get("name") == COUNTS_NAME]
    if not named:
        raise VerificationError(f"statement has no {COUNTS_NAME!r} subject")
    got = named[0]["digest"].get("sha256")
    if got != want:
        raise VerificationError(
            f"counts digest mismatch: statement says sha256:{got}, counts give sha256:{want}"
        )


def creg_widths(canonical: str) -> list[int]:
    """The classical registers' widths, in declaration order, of canonical circuit text."""
    return [int(width) for width in _CREG.findall(canonical)]


def circuit_layout(canonical: str, names: Sequence[str] = ()) -> RegisterLayout:
    """The register layout of a job's canonical circuit, with the names its user gave
    the registers (the canonical names c0, c1, … where none are known)."""
    widths = creg_widths(canonical)
    if len(names) != len(widths):
        names = [f"c{k}" for k in range(len(widths))]
    return RegisterLayout(tuple(zip(names, widths, strict=True)))


def register_layout(statement: Mapping[str, Any]) -> RegisterLayout:
    """How the keys of a run statement's counts are laid out: the registers its predicate
    records, or, for the first run predicate, the registers of its canonical circuit
    (named as the canonical text names them) with that version's key convention.
    VerificationError when the statement's layout is malformed."""
    predicate = statement.get("predicate") or {}
    if statement.get("predicateType") == FIRST_RUN_PREDICATE_TYPE:
        text = str((predicate.get("circuit") or {}).get("canonicalText") or "")
        return RegisterLayout(circuit_layout(text).registers, first=True)
    try:
        return RegisterLayout.from_json(predicate.get("registers"))
    except ValueError as exc:
        raise VerificationError(f"the statement's register layout is malformed: {exc}") from None


def check_layout(statement: Mapping[str, Any], counts: Mapping[str, Any]) -> RegisterLayout:
    """The statement's register layout, checked against its canonical circuit (widths in
    order) and the keys of ``counts``; VerificationError names what does not fit."""
    layout = register_layout(statement)
    text = str((statement["predicate"].get("circuit") or {}).get("canonicalText") or "")
    widths = creg_widths(text)
    if [width for _, width in layout.registers] != widths:
        raise VerificationError(
            f"the register layout {layout.registers} does not fit the signed circuit's "
            f"registers (widths {widths})"
        )
    for key in counts:
        try:
            layout.split(key)
        except ValueError as exc:
            raise VerificationError(str(exc)) from None
    return layout


# ---------------------------------------------------------------------------------------
# The submitter's code version


def check_subject_document(statement: Mapping[str, Any], name: str, document: bytes) -> None:
    """The subject called ``name`` has the SHA-256 of exactly these stored bytes."""
    named = [s for s in statement["subject"] if s.get("name") == name]
    if not named:
        raise VerificationError(f"statement has no {name!r} subject")
    got = named[0]["digest"].get("sha256")
    want = hashlib.sha256(document).hexdigest()
    if got != want:
        raise VerificationError(
            f"{name} digest mismatch: statement says sha256:{got}, stored bytes give sha256:{want}"
        )


def git_code_version(path: str | os.PathLike[str], *, timeout: float = 5.0) -> dict[str, Any]:
    """Commit, dirty flag and ``sha256:`` of ``git diff HEAD`` for the checkout at ``path``.

    Returns ``{"absent": True}`` outside a checkout, without git, on a repository with no
    commit, or when git is slow: recording the code version must never stop a submission.
    ``dirty`` also counts untracked files; ``diffHash`` covers tracked changes only.
    """
    env = {**os.environ, "GIT_OPTIONAL_LOCKS": "0", "LC_ALL": "C", "GIT_PAGER": "cat"}

    def git(*args: str) -> bytes:
        done = subprocess.run(
            ["git", "-C", os.fspath(path), *args],
            capture_output=True,
            timeout=timeout,
            env=env,
            check=True,
            stdin=subprocess.DEVNULL,
        )
        return done.stdout

    try:
        # One status call gives the commit (its branch header) and the dirty flag; the
        # diff is asked for only when there is something to diff. Every submission runs
        # this, so each git process saved is a few milliseconds off every submit.
        status = git("status", "--porcelain=v2", "--branch").decode("utf-8", "replace")
        lines = status.splitlines()
        heads = [line.split()[2] for line in lines if line.startswith("# branch.oid ")]
        if not heads or not re.fullmatch(r"[0-9a-f]{40}|[0-9a-f]{64}", heads[0]):
            return {"absent": True}  # "(initial)": a repository with no commit yet
        dirty = any(not line.startswith("#") for line in lines)
        diff = git("diff", "HEAD", "--binary", "--no-ext-diff", "--no-color") if dirty else b""
    except (OSError, subprocess.SubprocessError, UnicodeDecodeError, ValueError, IndexError):
        return {"absent": True}
    return {"commit": heads[0], "dirty": dirty, "diffHash": sha256_tag(diff)}
