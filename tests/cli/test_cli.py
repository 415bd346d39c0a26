"""The command line as a user meets it: exit codes of DESIGN §4 (0 ok, 1 a job failed or
verification found a problem, 2 bad input, 3 unreachable), one-line messages, JSON shapes,
and nothing half-written after bad input."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from jobkeeper.cli import main

REPO = Path(__file__).resolve().parents[2]
BELL = REPO / "examples" / "circuits" / "bell.qasm"


def jk(capsys: pytest.CaptureFixture[str], *args: str) -> tuple[int, str, str]:
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def keep(tmp_path: Path) -> str:
    return str(tmp_path / "keep")


def jobs_in(keep: str, capsys: pytest.CaptureFixture[str]) -> list[dict]:
    code, out, _ = jk(capsys, "jobs", "--keep", keep, "--json")
    assert code == 0
    return json.loads(out)


def test_run_json_has_counts_shots_seed_hash_backend(capsys, keep) -> None:
    code, out, _ = jk(
        capsys, "run", str(BELL), "--keep", keep, "--shots", "500", "--seed", "9", "--json"
    )
    assert code == 0
    data = json.loads(out)
    assert set(data) >= {"counts", "shots", "seed", "circuit_hash", "backend", "id"}
    assert data["shots"] == 500 and sum(data["counts"].values()) == 500
    assert set(data["counts"]) <= {"00", "11"}  # Bell pair (Nielsen & Chuang §1.3.6)
    assert data["circuit_hash"].startswith("sha256:")


def test_run_exact_prints_probabilities(capsys, keep) -> None:
    code, out, _ = jk(capsys, "run", str(BELL), "--keep", keep, "--exact", "--json")
    assert code == 0
    probs = json.loads(out)["probabilities"]
    assert probs == pytest.approx({"00": 0.5, "11": 0.5}, abs=1e-12)  # Nielsen & Chuang §1.3.6


def test_submit_twice_reports_the_done_job(capsys, keep) -> None:
    code, out, _ = jk(capsys, "run", str(BELL), "--keep", keep, "--seed", "1")
    assert code == 0
    code, out, _ = jk(capsys, "submit", str(BELL), "--keep", keep, "--seed", "1", "--json")
    [item] = json.loads(out)
    assert item["deduplicated"] is True and item["state"] == "done"
    code, out, _ = jk(capsys, "submit", str(BELL), "--keep", keep, "--seed", "1")
    assert "already done" in out and "nothing queued" in out
    code, out, _ = jk(
        capsys, "submit", str(BELL), "--keep", keep, "--seed", "1", "--repeat", "1", "--json"
    )
    assert json.loads(out)[0]["deduplicated"] is False


def test_jobs_show_counts_cancel_json_shapes(capsys, keep) -> None:
    jk(capsys, "run", str(BELL), "--keep", keep, "--label", "demo")
    [job] = jobs_in(keep, capsys)
    assert set(job) >= {"id", "state", "backend", "shots", "labels", "created_at"}
    code, out, _ = jk(capsys, "show", job["id"][:8], "--keep", keep, "--json")
    shown = json.loads(out)
    assert shown["signed_envelope"]["payloadType"] == "application/vnd.in-toto+json"
    assert shown["verification"]["ok"] is True
    code, out, _ = jk(capsys, "counts", job["id"][:8], "--keep", keep)
    assert sum(json.loads(out)["counts"].values()) == 1024
    assert json.loads(out)["count_keys"]["registers"] == [{"name": "c", "width": 2}]
    code, out, _ = jk(capsys, "counts", job["id"][:8], "--keep", keep, "--format", "csv")
    assert out.splitlines()[0] == "outcome,reg_c,count"
    code, _, err = jk(capsys, "cancel", job["id"][:8], "--keep", keep)
    assert code == 2 and "already ended" in err


def test_cancel_a_queued_job(capsys, keep) -> None:
    code, out, _ = jk(capsys, "submit", str(BELL), "--keep", keep, "--json")
    job_id = json.loads(out)[0]["id"]
    code, out, _ = jk(capsys, "cancel", job_id, "--keep", keep, "--json")
    assert code == 0 and json.loads(out)["state"] == "cancelled"


BAD_CIRCUIT = 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\nh q[0]\ncx q[0],q[1];\n'


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--shots", "0"], "shots must be a positive"),
        (["--shots", "-5"], "shots must be a positive"),
        (["--shots", "100000000"], "at most"),
        (["-b", "no-such-backend"], "unknown backend 'no-such-backend'"),
    ],
)
def test_bad_options_exit_2_with_one_line_and_queue_nothing(capsys, keep, args, message) -> None:
    assert jk(capsys, "init", "--keep", keep)[0] == 0
    code, _, err = jk(capsys, "submit", str(BELL), "--keep", keep, *args)
    assert code == 2, err
    assert message in err and err.count("\n") == 1 and "Traceback" not in err
    assert jobs_in(keep, capsys) == []


@pytest.mark.parametrize("command", ["check", "run", "submit"])
@pytest.mark.parametrize(
    ("args", "message"),
    [(["--shots", "-5"], "shots must be a positive whole number, got -5"),
     (["--seed", "-1"], "seed must be a whole number from 0 to 2^63-1, got -1"),
     (["--repeat", "-1"], "repeat must be zero or a positive whole number, got -1")],
)  # fmt: skip
def test_every_command_refuses_a_bad_option_with_the_same_message(
    capsys, keep, command, args, message
) -> None:
    # One check of submission options (SubmitOptions), whichever command is given them.
    if command == "check" and args[0] != "--shots":
        return  # check takes only --backend and --shots
    code, _, err = jk(capsys, command, str(BELL), "--keep", keep, *args)
    assert (code, err) == (2, f"jobkeeper: {message}\n")


def test_malformed_circuit_names_file_line_column(capsys, keep, tmp_path) -> None:
    bad = tmp_path / "bad.qasm"
    bad.write_text(BAD_CIRCUIT)
    code, _, err = jk(capsys, "submit", str(bad), str(BELL), "--keep", keep)
    assert code == 2
    assert err.startswith(f"jobkeeper: {bad}:4:") and "';'" in err
    assert jobs_in(keep, capsys) == []  # the good file was not queued either: nothing half-done


def test_too_many_qubits_fails_the_job_at_run_time_with_the_reason(capsys, keep, tmp_path) -> None:
    big = tmp_path / "big.qasm"
    big.write_text(
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[40];\ncreg c[40];\nh q[0];\nmeasure q -> c;\n'
    )
    code, out, _ = jk(capsys, "run", str(big), "--keep", keep, "--json")
    assert code == 1
    data = json.loads(out)
    assert data["state"] == "failed" and "40 qubits" in data["error"]


def test_unknown_and_ambiguous_job_ids(capsys, keep) -> None:
    for _ in range(20):
        jk(capsys, "submit", str(BELL), "--keep", keep, "--repeat", str(_))
    code, _, err = jk(capsys, "show", "ffffffffff", "--keep", keep)
    assert code == 2 and "no job matches" in err
    ids = [j["id"] for j in jobs_in(keep, capsys)]
    firsts = [i[0] for i in ids]
    shared = max(set(firsts), key=firsts.count)
    code, _, err = jk(capsys, "show", shared, "--keep", keep)
    assert code == 2 and "matches several jobs" in err


def test_reading_a_keep_that_does_not_exist(capsys, tmp_path) -> None:
    code, _, err = jk(capsys, "jobs", "--keep", str(tmp_path / "nowhere"))
    assert code == 3 and "jobkeeper init" in err


@pytest.mark.skipif(os.geteuid() == 0, reason="root can write anywhere; permissions do not bind")
def test_keep_directory_that_cannot_be_written(capsys, tmp_path) -> None:
    locked = tmp_path / "locked"
    locked.mkdir(mode=0o500)
    code, _, err = jk(capsys, "submit", str(BELL), "--keep", str(locked / "keep"))
    assert code == 2 and "cannot write" in err


def test_keep_directory_under_a_file_cannot_be_written(capsys, tmp_path) -> None:
    blocker = tmp_path / "file"
    blocker.write_text("not a directory")
    code, _, err = jk(capsys, "submit", str(BELL), "--keep", str(blocker / "keep"))
    assert code == 2 and "cannot write the keep directory" in err


def test_every_command_has_help_and_is_in_the_readme() -> None:
    from jobkeeper.cli import app

    readme = (REPO / "README.md").read_text()
    for command in app.registered_commands:
        name = command.name or command.callback.__name__.replace("_", "-")
        assert command.callback.__doc__, f"{name} has no help text"
        assert f"jobkeeper {name}" in readme, f"README does not show 'jobkeeper {name}'"


def test_worker_help_offers_slots_not_a_borrowed_name(capsys) -> None:
    # How many jobs one worker runs at once is called its slots (the own-names issue).
    code, out, _ = jk(capsys, "worker", "--help")
    assert code == 0
    assert "--slots" in out and "--concurrency" not in out


def test_console_entry_point_runs_in_a_subprocess(tmp_path) -> None:
    proc = subprocess.run(
        [sys.executable, "-m", "jobkeeper", "run", str(BELL), "--keep", str(tmp_path / "k"),
         "--seed", "3", "--json"],
        capture_output=True, text=True, timeout=120, check=False,
    )  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    assert sum(json.loads(proc.stdout)["counts"].values()) == 1024


def test_keys_json_export_and_rotation_keep_old_entries_verifying(capsys, keep, tmp_path) -> None:
    import base64
    import hashlib

    assert main(["run", str(BELL), "--keep", keep, "--seed", "1"]) == 0
    capsys.readouterr()
    code, out, _ = jk(
        capsys, "keys", "--keep", keep, "--json", "--export", str(tmp_path / "k.json")
    )
    first = json.loads(out)
    raw = base64.b64decode(first["public_key"])
    # The fingerprint is SHA-256 of the raw 32-byte Ed25519 key (RFC 8032 §5.1.5 key size).
    assert len(raw) == 32 and first["fingerprint"] == hashlib.sha256(raw).hexdigest()
    assert json.loads((tmp_path / "k.json").read_text()) == first
    code, out, _ = jk(capsys, "keys", "--keep", keep, "--rotate", "--json")
    second = json.loads(out)
    assert second["fingerprint"] != first["fingerprint"]
    assert main(["run", str(BELL), "--keep", keep, "--seed", "2"]) == 0
    capsys.readouterr()
    code, out, _ = jk(capsys, "verify", "--all", "--keep", keep, "--json")
    assert code == 0 and json.loads(out)["ok"] is True
    # Pinning only the new key: the entry signed before the rotation no longer verifies.
    code, out, _ = jk(
        capsys, "verify", "--all", "--keep", keep, "--json", "--key", second["fingerprint"]
    )
    assert code == 1 and json.loads(out)["problems"]


def test_a_job_takes_several_labels_and_is_found_under_each(capsys, keep) -> None:
    code, _, err = jk(capsys, "submit", str(BELL), "--keep", keep, "--label", "fig3",
                      "--label", "draft", "--json")  # fmt: skip
    assert code == 0, err
    for label in ("fig3", "draft"):
        code, out, _ = jk(capsys, "jobs", "--keep", keep, "--label", label, "--json")
        assert [job["labels"] for job in json.loads(out)] == [["draft", "fig3"]]
