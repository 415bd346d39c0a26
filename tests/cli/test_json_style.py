"""One key style in the command line's JSON (the own-names issue): every key the CLI prints
is snake_case. A signed document is printed whole, under a field named for it
(``signed_envelope``, ``signed_report``): its keys are the signed format's own (in-toto
and DSSE use lowerCamelCase) and are left as signed. Maps whose keys are data (outcomes,
a job's options and inputs, a device's metadata) are not names and are not checked."""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import pytest

from jobkeeper.cli import main

REPO = Path(__file__).resolve().parents[2]
BELL = REPO / "examples" / "circuits" / "bell.qasm"

SNAKE = re.compile(r"^[a-z][a-z0-9]*(_[a-z0-9]+)*$")
#: Fields that hold a signed document, printed as it was signed.
SIGNED = {"signed_envelope", "signed_report", "signed_statement"}
#: Fields whose keys are data, not names.
DATA = {"counts", "probabilities", "options", "inputs", "bindings", "result_metadata",
        "labels_spent", "spent", "by_label", "metadata", "code_version"}  # fmt: skip


def bad_keys(value: Any, path: str = "") -> list[str]:
    found: list[str] = []
    if isinstance(value, dict):
        for key, inner in value.items():
            where = f"{path}.{key}"
            if not SNAKE.match(str(key)):
                found.append(where)
            if key in SIGNED or key in DATA:
                continue
            found += bad_keys(inner, where)
    elif isinstance(value, list):
        for i, inner in enumerate(value):
            found += bad_keys(inner, f"{path}[{i}]")
    return found


def run_json(capsys: pytest.CaptureFixture[str], *args: str) -> Any:
    code = main([*args, "--json"])
    out, err = capsys.readouterr()
    assert code in (0, 1), err
    return json.loads(out)


def test_every_read_command_prints_snake_case_json(capsys, tmp_path: Path) -> None:
    keep = ["--keep", str(tmp_path / "keep")]
    a = run_json(capsys, "run", str(BELL), "--shots", "400", "--seed", "1", *keep)
    b = run_json(capsys, "run", str(BELL), "--shots", "400", "--seed", "2", *keep)
    documents = {
        "run": a,
        "init": run_json(capsys, "init", *keep),
        "backends": run_json(capsys, "backends", *keep),
        "check": run_json(capsys, "check", str(BELL), *keep),
        "submit": run_json(capsys, "submit", str(BELL), "--shots", "300", *keep),
        "jobs": run_json(capsys, "jobs", *keep),
        "show": run_json(capsys, "show", a["id"], *keep),
        "wait": run_json(capsys, "wait", a["id"], *keep),
        "keys": run_json(capsys, "keys", *keep),
        "verify": run_json(capsys, "verify", "--all", *keep),
        "compare": run_json(capsys, "compare", a["id"], b["id"], *keep),
        "compare --ideal": run_json(capsys, "compare", a["id"], "--ideal", *keep),
        "rerun": run_json(capsys, "rerun", a["id"], *keep),
        "trust list": run_json(capsys, "trust", "list", *keep),
        "bundle": run_json(capsys, "bundle", a["id"], "-o", str(tmp_path / "b.json"), *keep),
        "export": run_json(capsys, "export", "-o", str(tmp_path / "e.db"), *keep),
    }
    # `counts --json`: the key layout, and the outcome table (its keys are outcomes: data).
    counts = run_json(capsys, "counts", a["id"], *keep)
    assert counts["counts"] == a["counts"]
    documents["counts"] = {"count_keys": counts["count_keys"]}
    problems = {name: bad_keys(doc) for name, doc in documents.items()}
    assert not {name: keys for name, keys in problems.items() if keys}
    # The signed documents are there, whole, under fields that say so.
    assert documents["show"]["signed_envelope"]["payloadType"]
    assert documents["compare"]["signed_report"]["jobA"] == a["id"]
    assert documents["compare"]["job_a"] == a["id"]


def test_an_old_report_is_shown_under_todays_names() -> None:
    from jobkeeper.shapes import comparison_result

    # A result archived before the rename held (Σ√(p·q))² = 0.36 under the old key: by
    # hand, BC = √0.36 = 0.6 and H = √(1 − 0.6) = 0.632456.
    old_key = "hellinger_" + "fidelity"
    shown = comparison_result(
        {"tvd": 0.8, old_key: 0.36, "summary": f"TVD 0.800. Hellinger {old_key[10:]} 0.3600."}
    )
    assert shown["bhattacharyya_coefficient"] == pytest.approx(0.6)
    assert shown["hellinger_distance"] == pytest.approx(0.632456, abs=1e-6)
    assert "fidelity" not in json.dumps(shown)
    assert "Bhattacharyya coefficient 0.6000, Hellinger distance 0.6325." in shown["summary"]
