"""Run manifests: in-toto Statement v1 with the jobkeeper run predicate."""

from __future__ import annotations

import hashlib
import json
import shutil
import subprocess
from pathlib import Path
from typing import Any

import pytest
from pydantic import ValidationError

from jobkeeper.exceptions import ProvenanceError, VerificationError
from jobkeeper.hashing import canonical_json
from jobkeeper.provenance import (
    PREDICATE_TYPE,
    STATEMENT_TYPE,
    RunPredicate,
    build_statement,
    counts_digest,
    counts_document,
    git_code_version,
    parse_statement,
    statement_bytes,
    verify_subject,
)

COUNTS = {"00": 493, "11": 531}


def predicate(counts: dict[str, int] = COUNTS, **changes: Any) -> RunPredicate:
    """An invented run, for tests only."""
    data: dict[str, Any] = {
        "jobKey": "sha256:" + "ab" * 32,
        "circuit": {
            "canonicalText": "OPENQASM 2.0;\nqreg q[2];\ncreg c0[2];\nh q[0];\ncx q[0],q[1];\n",
            "hash": "sha256:" + "cd" * 32,
            "sourceHash": "sha256:" + "ef" * 32,
        },
        "parameters": {"theta": 0.5},
        "shots": sum(counts.values()),
        "seed": "18446744073709551615",
        "backend": {"name": "statevector", "kind": "simulator", "version": "0.1.0"},
        "software": {
            "jobkeeper": "0.1.0",
            "python": "3.11.9",
            "numpy": "2.4.6",
            "platform": "linux",
        },
        "codeVersion": {"absent": True},
        "timestamps": {
            "submittedOn": "2026-12-01T10:00:00Z",
            "startedOn": "2026-12-01T10:00:01Z",
            "finishedOn": "2026-12-01T10:00:02.5Z",
        },
        "attempts": [{"number": 1, "startedOn": "2026-12-01T10:00:01Z", "outcome": "done"}],
        "registers": [{"name": "c", "width": 2}],
        "counts": counts,
    }
    data.update(changes)
    return RunPredicate.model_validate(data)


def test_statement_shape_and_subject_digest() -> None:
    st = build_statement(COUNTS, predicate())
    assert st["_type"] == STATEMENT_TYPE == "https://in-toto.io/Statement/v1"
    # in-toto predicate type: any URI with the major version at its end; ours is a URN
    assert st["predicateType"] == PREDICATE_TYPE == "urn:jobkeeper:predicate:run:v2"
    # Subject digest = SHA-256 of the RFC 8785 canonical counts (in-toto digest_set.md).
    assert counts_document(COUNTS) == b'{"00":493,"11":531}'
    want = hashlib.sha256(b'{"00":493,"11":531}').hexdigest()
    assert st["subject"] == [{"name": "counts.json", "digest": {"sha256": want}}]
    payload = statement_bytes(st)
    assert payload == canonical_json(st)
    assert parse_statement(payload) == st
    verify_subject(payload, {"11": 531, "00": 493})  # key order does not matter


def test_predicate_uses_lower_camel_case_and_string_seed() -> None:
    wire = predicate().to_json()
    assert {"jobKey", "codeVersion", "timestamps", "attempts"} <= set(wire)
    assert wire["circuit"]["canonicalText"].startswith("OPENQASM")
    assert wire["timestamps"]["submittedOn"] == "2026-12-01T10:00:00Z"
    assert wire["seed"] == "18446744073709551615"  # beyond 2^53: a string by design
    assert wire["codeVersion"] == {"absent": True}
    with pytest.raises(ValidationError):
        predicate(seed=42)
    with pytest.raises(ValidationError):
        predicate(timestamps={"submittedOn": "2026-12-01 10:00:00"})
    # Unknown fields from a later minor version are ignored (in-toto monotonic rule).
    assert RunPredicate.model_validate({**wire, "futureField": 1}).to_json() == wire


def test_counts_mismatch_and_bad_counts_are_refused() -> None:
    with pytest.raises(ProvenanceError, match="differ"):
        build_statement({"00": 1}, predicate())
    for bad in ({"00": -1}, {"00": 2**53}, {"00": True}, {"00": 1.0}):
        with pytest.raises(ProvenanceError):
            counts_document(bad)  # type: ignore[arg-type]


def test_subject_mismatch_is_reported() -> None:
    # Standards note §7 test 9: one count changed by one.
    payload = statement_bytes(build_statement(COUNTS, predicate()))
    with pytest.raises(VerificationError, match="counts digest mismatch"):
        verify_subject(payload, {"00": 494, "11": 531})
    assert counts_digest(COUNTS) != counts_digest({"00": 494, "11": 531})


@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"_type": "https://in-toto.io/Statement/v0.1"}, "_type"),
        ({"subject": []}, "subject"),
        ({"subject": [{"name": "counts.json"}]}, "digest"),
        ({"subject": [{"name": "x", "digest": {"sha256": "AB" * 32}}]}, "sha256"),
        ({"subject": [{"name": "x", "digest": {"sha256": "ab" * 31}}]}, "sha256"),
        ({"predicateType": "https://example.org/other/v1"}, "predicateType"),
        ({"predicate": None}, "predicate"),
    ],
)
def test_malformed_statements_name_the_field(change: dict[str, Any], field: str) -> None:
    # Standards note §7 test 8 (in-toto statement.md rules and the Go validator's checks).
    st = {**build_statement(COUNTS, predicate()), **change}
    with pytest.raises(VerificationError, match=field):
        parse_statement(json.dumps(st).encode())


def test_git_code_version_outside_and_inside_a_checkout(tmp_path: Path) -> None:
    assert git_code_version(tmp_path) == {"absent": True}
    assert git_code_version(tmp_path / "missing") == {"absent": True}
    if shutil.which("git") is None:
        pytest.skip("git is not installed")
    env_args = ["-c", "user.name=t", "-c", "user.email=t@example.invalid"]

    def git(*args: str) -> None:
        subprocess.run(
            ["git", *env_args, "-C", str(tmp_path), *args], check=True, capture_output=True
        )

    git("init", "-q")
    assert git_code_version(tmp_path) == {"absent": True}  # no commit yet
    (tmp_path / "run.py").write_text("print(1)\n")
    git("add", "run.py")
    git("commit", "-q", "-m", "first")
    clean = git_code_version(tmp_path)
    assert len(clean["commit"]) == 40 and clean["dirty"] is False
    assert clean["diffHash"] == "sha256:" + hashlib.sha256(b"").hexdigest()
    head = subprocess.run(
        ["git", "-C", str(tmp_path), "rev-parse", "HEAD"], check=True, capture_output=True
    )
    assert clean["commit"] == head.stdout.decode().strip()
    # An untracked file makes the tree dirty, but `git diff HEAD` (the diff hash) covers
    # tracked changes only, as the docstring says.
    (tmp_path / "notes.txt").write_text("draft\n")
    untracked = git_code_version(tmp_path)
    assert untracked["dirty"] is True and untracked["diffHash"] == clean["diffHash"]
    (tmp_path / "notes.txt").unlink()
    (tmp_path / "run.py").write_text("print(2)\n")
    dirty = git_code_version(tmp_path)
    assert dirty["dirty"] is True and dirty["commit"] == clean["commit"]
    assert dirty["diffHash"] != clean["diffHash"]
    assert (
        RunPredicate.model_validate({**predicate().to_json(), "codeVersion": dirty}).to_json()[
            "codeVersion"
        ]
        == dirty
    )
