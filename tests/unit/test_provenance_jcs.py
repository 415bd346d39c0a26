"""RFC 8785 canonical JSON, which manifests and counts digests rely on."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from jobkeeper.hashing import canonical_json

CASES = ["arrays", "french", "structures", "unicode", "values", "weird"]


@pytest.mark.parametrize("name", CASES)
def test_rfc8785_reference_outputs(vectors_dir: Path, name: str) -> None:
    # Source: cyberphone/json-canonicalization testdata/{input,output,outhex} (published,
    # by the RFC 8785 author); output bytes exactly, no trailing newline.
    jcs = vectors_dir / "jcs"
    value = json.loads((jcs / "input" / f"{name}.json").read_text(encoding="utf-8"))
    expected = (jcs / "output" / f"{name}.json").read_bytes()
    assert canonical_json(value) == expected
    outhex = "".join((jcs / "outhex" / f"{name}.txt").read_text().split())
    assert bytes.fromhex(outhex) == expected
