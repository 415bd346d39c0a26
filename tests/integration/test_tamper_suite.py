"""The tamper suite: well over a hundred distinct edits to a real SQLite archive and to a
real bundle, each one detected (exit 1, or 3 where the archive can no longer be opened),
and none shown as valid by a read command; edits to what no signature covers (labels, a
queued job) are shown as unsigned.

The keep is made once per module by the real worker (jobs in several transactions, one
with retried attempts, one with exact probabilities, a comparison, a queued job); each
case works on a copy. The edits are what someone with write access to the file or the
bundle would do, made with plain SQL and JSON.

Published principles, not values: DSSE signatures cover the exact payload bytes (DSSE
protocol v1); a Merkle log with signed checkpoints makes deleting, reordering or
rewriting entries detectable, and a consistency proof from a remembered checkpoint makes
rollbacks detectable (RFC 9162 §2.1.3, §2.1.4; C2SP tlog-checkpoint).
"""

from __future__ import annotations

import base64
import copy
import json
import shutil
import sqlite3
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

from jobkeeper import Keeper
from jobkeeper.audit.trust import load_trust
from jobkeeper.audit.verification import verify_bundle_file
from jobkeeper.cli import main
from jobkeeper.exceptions import VerificationError
from jobkeeper.provenance.dsse import PAYLOAD_TYPE, envelope_bytes, sign_envelope
from jobkeeper.provenance.keys import KeyRing, fingerprint
from tests.integration.helpers import circuit_text

FAST_RETRY = {"base": 0.01, "cap": 0.02}


@dataclass(frozen=True)
class Made:
    keep: Path
    done: list[str]  # done jobs, in log order
    flaky: str  # the job with retried attempts
    exact: str  # the job with exact probabilities
    queued: str
    comparison: str
    bundle: Path
    counts: dict[str, str]  # job id → what `counts` prints for it


@pytest.fixture(scope="module")
def made(tmp_path_factory: pytest.TempPathFactory) -> Made:
    from jobkeeper.queue import RetryPolicy

    root = tmp_path_factory.mktemp("tamper-suite")
    keep = root / "keep"
    keep.mkdir()
    (keep / "config.toml").write_text(
        f'[backends.flaky]\nadapter = "flaky"\nledger_dir = "{root / "ledger"}"\nfailures = 2\n'
    )
    with Keeper.open(keep) as keeper:
        pair = keeper.run_many(
            [circuit_text(0.1), circuit_text(0.2)], shots=64, seed=3, labels={"batch"}
        )
        flaky = keeper.run_many(
            [circuit_text(0.3)], backend="flaky", shots=32, retry=RetryPolicy(**FAST_RETRY)
        )[0].job
        exact = keeper.run(circuit_text(0.4), shots=16, seed=5, exact=True)
        comparison = keeper.compare(pair[0].job.id, pair[1].job.id).record.id
        queued = keeper.submit(circuit_text(0.5), shots=8, labels={"later"})
        done = [e.job_id for e in keeper.store.log_entries() if e.job_id != comparison]
        assert flaky.state == "done" and len(flaky.attempts) == 2
        assert keeper.verify().ok
    bundle = root / "all.json"
    assert main(["bundle", *done, "--keep", str(keep), "-o", str(bundle)]) == 0
    counts = {}
    for job_id in done:
        with Keeper.open(keep, create=False) as keeper:
            result = keeper.job(job_id).result
            assert result is not None
            counts[job_id] = json.dumps(
                dict(result.probabilities or result.counts or {}), sort_keys=True
            )
    return Made(keep, done, flaky.id, exact.id, queued.id, comparison, bundle, counts)


def _run(capsys: pytest.CaptureFixture[str], *args: str) -> tuple[int, str, str]:
    capsys.readouterr()
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


# -- edits to the archive ----------------------------------------------------------------

Edit = Callable[[sqlite3.Connection, Made], Any]


def _spec(field: str, value: Any) -> Edit:
    def edit(conn: sqlite3.Connection, job: str) -> None:
        (text,) = conn.execute("SELECT spec FROM jobs WHERE id = ?", (job,)).fetchone()
        doc = json.loads(text)
        doc[field] = value(doc.get(field)) if callable(value) else value
        conn.execute("UPDATE jobs SET spec = ? WHERE id = ?", (json.dumps(doc), job))

    return edit  # type: ignore[return-value]


def _sql(statement: str) -> Callable[[sqlite3.Connection, str], None]:
    return lambda conn, job: conn.execute(statement, {"job": job}) and None


def _counts(change: Callable[[dict[str, int]], dict[str, int]]) -> Callable[..., None]:
    def edit(conn: sqlite3.Connection, job: str) -> None:
        (text,) = conn.execute("SELECT counts FROM results WHERE job_id = ?", (job,)).fetchone()
        counts = change(json.loads(text))
        conn.execute(
            "UPDATE results SET counts = ? WHERE job_id = ?",
            (json.dumps(counts, separators=(",", ":"), sort_keys=True), job),
        )

    return edit


def _bump(counts: dict[str, int]) -> dict[str, int]:
    first = sorted(counts)[0]
    return {**counts, first: counts[first] + 1}


def _shift(counts: dict[str, int]) -> dict[str, int]:
    keys = sorted(counts)
    if len(keys) < 2:
        return {**counts, "0" * len(keys[0]): 1}
    return {**counts, keys[0]: counts[keys[0]] - 1, keys[1]: counts[keys[1]] + 1}


#: Edits to one done job's signed facts, applied to every done job.
PER_JOB: dict[str, Callable[[sqlite3.Connection, str], None]] = {
    "backend": _sql("UPDATE jobs SET backend = 'densitymatrix' WHERE id = :job"),
    "shots": _sql("UPDATE jobs SET shots = shots + 1 WHERE id = :job"),
    "repeat": _sql("UPDATE jobs SET repeat = repeat + 1 WHERE id = :job"),
    "job key": _sql("UPDATE jobs SET job_key = 'sha256:' || hex(randomblob(32)) WHERE id = :job"),
    "state failed": _sql("UPDATE jobs SET state = 'failed' WHERE id = :job"),
    "state queued": _sql("UPDATE jobs SET state = 'queued' WHERE id = :job"),
    "submitted time": _sql("UPDATE jobs SET created_at = created_at - 60 WHERE id = :job"),
    "started time": _sql("UPDATE jobs SET started_at = started_at + 1 WHERE id = :job"),
    "finished time": _sql("UPDATE jobs SET finished_at = finished_at + 3600 WHERE id = :job"),
    "finished earlier": _sql("UPDATE jobs SET finished_at = finished_at - 30 WHERE id = :job"),
    "spec seed": _spec("seed", lambda seed: int(seed) + 1),
    "spec circuit": _spec("circuit", lambda text: text.replace("h q[0]", "x q[0]")),
    "spec circuit hash": _spec("circuitHash", "sha256:" + "0" * 64),
    "spec source hash": _spec("sourceHash", "sha256:" + "1" * 64),
    "spec exact": _spec("exact", lambda exact: not exact),
    "spec options": _spec("options", {"optimise": True}),
    "spec code version": _spec(
        "codeVersion", {"commit": "0" * 40, "dirty": False, "diffHash": "sha256:" + "2" * 64}
    ),
    "spec register names": _spec("registerNames", ["forged"]),
    "spec register names dropped": _spec("registerNames", []),
    "spec unreadable": _sql("UPDATE jobs SET spec = '{' WHERE id = :job"),
    "count changed": _counts(_bump),
    "counts moved": _counts(_shift),
    "outcome added": _counts(lambda c: {**c, "1" * len(next(iter(c))): 1}),
    "outcome removed": _counts(lambda c: {k: v for k, v in c.items() if k != sorted(c)[-1]}),
    "counts respaced": _sql(
        "UPDATE results SET counts = replace(counts, ':', ': ') WHERE job_id = :job"
    ),
    "counts cleared": _sql("UPDATE results SET counts = NULL WHERE job_id = :job"),
    "counts unreadable": _sql("UPDATE results SET counts = '{\"00\":' WHERE job_id = :job"),
    "metadata": _sql(
        "UPDATE results SET metadata = json_set(metadata, '$.method', 'forged') WHERE job_id = :job"
    ),
    "metadata added": _sql(
        "UPDATE results SET metadata = json_set(metadata, '$.extra', 1) WHERE job_id = :job"
    ),
    "result deleted": _sql("DELETE FROM results WHERE job_id = :job"),
    "attempt added": _sql(
        "INSERT INTO attempts (job_id, number, at, error_class, message) "
        "VALUES (:job, 9, 0, 'TransientBackendError', 'forged')"
    ),
    "log entry deleted": _sql("DELETE FROM log_entries WHERE job_id = :job"),
    "envelope byte": _sql(
        "UPDATE log_entries SET envelope = CAST(replace(CAST(envelope AS "
        'TEXT), \'"sig":"\', \'"sig":"A\') AS BLOB) WHERE job_id = :job'
    ),
    "envelope keyid": _sql(
        "UPDATE log_entries SET envelope = CAST(replace(CAST(envelope AS "
        'TEXT), \'"keyid":"\', \'"keyid":"0\') AS BLOB) WHERE job_id = :job'
    ),
    "signer": _sql("UPDATE log_entries SET signer = hex(randomblob(32)) WHERE job_id = :job"),
    "leaf hash": _sql("UPDATE log_entries SET leaf_hash = zeroblob(32) WHERE job_id = :job"),
    "entry moved to another job": _sql(
        "UPDATE log_entries SET job_id = (SELECT id FROM jobs WHERE state = 'queued') "
        "WHERE job_id = :job"
    ),
}

#: Edits of one job's retried attempts (the job that has them).
ATTEMPTS = {
    "attempt message": "UPDATE attempts SET message = 'forged' WHERE job_id = :job AND number = 1",
    "attempt class": "UPDATE attempts SET error_class = 'X' WHERE job_id = :job AND number = 2",
    "attempt time": "UPDATE attempts SET at = at + 5 WHERE job_id = :job AND number = 1",
    "attempt deleted": "DELETE FROM attempts WHERE job_id = :job AND number = 2",
    "attempt renumbered": "UPDATE attempts SET number = 7 WHERE job_id = :job AND number = 2",
    "attempt in call": "UPDATE attempts SET in_call = 1 WHERE job_id = :job AND number = 1",
    "attempts wiped": "DELETE FROM attempts WHERE job_id = :job",
}

EXACT = {
    "probability changed": "UPDATE results SET probabilities = json_set(probabilities, "
    "'$.\"00\"', 0.75) WHERE job_id = :job",
    "probabilities cleared": "UPDATE results SET probabilities = NULL WHERE job_id = :job",
}

#: Edits of the log, its checkpoints and state, the comparison and the keep's identity.
WHOLE: dict[str, str | tuple[str, ...]] = {
    "first entry deleted": "DELETE FROM log_entries WHERE idx = 0",
    "entries swapped": (
        "UPDATE log_entries SET idx = -1 WHERE idx = 0",
        "UPDATE log_entries SET idx = 0 WHERE idx = 1",
        "UPDATE log_entries SET idx = 1 WHERE idx = -1",
    ),
    "entry appended again": "INSERT INTO log_entries SELECT idx + 100, 'x' || job_id, envelope, "
    "leaf_hash, signer, created_at FROM log_entries WHERE idx = 0",
    "last checkpoint deleted": "DELETE FROM checkpoints WHERE size = (SELECT MAX(size) "
    "FROM checkpoints)",
    "first checkpoint deleted": "DELETE FROM checkpoints WHERE size = (SELECT MIN(size) "
    "FROM checkpoints)",
    "middle checkpoint deleted": "DELETE FROM checkpoints WHERE size = (SELECT size FROM "
    "checkpoints ORDER BY size LIMIT 1 OFFSET 1)",
    "every checkpoint deleted": "DELETE FROM checkpoints",
    "checkpoint note": "UPDATE checkpoints SET note = replace(note, '\u2014 ', '\u2014  ') "
    "WHERE size = (SELECT MAX(size) FROM checkpoints)",
    "checkpoint root column": "UPDATE checkpoints SET root = zeroblob(32) WHERE size = "
    "(SELECT MIN(size) FROM checkpoints)",
    "checkpoint size column": "UPDATE checkpoints SET size = size + 100 WHERE size = "
    "(SELECT MAX(size) FROM checkpoints)",
    "log state zeroed": "UPDATE log_state SET state = zeroblob(length(state))",
    "log state size": "UPDATE log_state SET size = size + 1",
    "log state deleted": "DELETE FROM log_state",
    "origin": "UPDATE meta SET value = 'jobkeeper/forged' WHERE key = 'origin'",
    "comparison verdict": "UPDATE comparisons SET verdict = 'different'",
    "comparison kind": "UPDATE comparisons SET kind = 'rerun'",
    "comparison jobs swapped": "UPDATE comparisons SET job_a = job_b, job_b = job_a",
    "comparison report": "UPDATE comparisons SET report = replace(report, '\"alpha\":0.01', "
    "'\"alpha\":0.05')",
    "comparison deleted": "DELETE FROM comparisons",
}


def _roll_back(conn: sqlite3.Connection, entries: int) -> None:
    """A consistent older archive: the last entries gone with their checkpoints, results
    and the comparison, jobs set back to queued, the log state recomputed."""
    from jobkeeper.audit.sealing import log_state_of

    size = conn.execute("SELECT COUNT(*) FROM log_entries").fetchone()[0] - entries
    gone = [r[0] for r in conn.execute("SELECT job_id FROM log_entries WHERE idx >= ?", (size,))]
    conn.execute("DELETE FROM log_entries WHERE idx >= ?", (size,))
    conn.execute("DELETE FROM checkpoints WHERE size > ?", (size,))
    for subject in gone:
        conn.execute("DELETE FROM comparisons WHERE id = ?", (subject,))
        conn.execute("DELETE FROM results WHERE job_id = ?", (subject,))
        conn.execute(
            "UPDATE jobs SET state = 'queued', finished_at = NULL WHERE id = ?", (subject,)
        )
    leaves = [bytes(r[0]) for r in conn.execute("SELECT leaf_hash FROM log_entries ORDER BY idx")]
    conn.execute("UPDATE log_state SET size = ?, state = ?", (size, log_state_of(leaves)))


def _cases() -> list[tuple[str, str, Any]]:
    """(case id, which job it targets: an index into the done jobs, 'flaky', 'exact' or
    '-', the edit)."""
    cases: list[tuple[str, str, Any]] = []
    for n in range(4):
        for name, edit in PER_JOB.items():
            cases.append((f"job{n}: {name}", str(n), edit))
    cases += [(f"flaky: {name}", "flaky", _sql(s)) for name, s in ATTEMPTS.items()]
    cases += [(f"exact: {name}", "exact", _sql(s)) for name, s in EXACT.items()]
    for name, statements in WHOLE.items():
        statements = (statements,) if isinstance(statements, str) else statements

        def edit(conn: sqlite3.Connection, job: str, s: tuple[str, ...] = statements) -> None:
            for statement in s:
                conn.execute(statement)

        cases.append((name, "-", edit))
    cases.append(
        ("queued job marked done", "queued", _sql("UPDATE jobs SET state = 'done' WHERE id = :job"))
    )
    for entries in (1, 2, 5):
        cases.append(
            (f"rolled back {entries}", "-", lambda conn, job, k=entries: _roll_back(conn, k))
        )
    return cases


FILE_CASES = {
    "truncated to zero": lambda data: b"",
    "truncated to a page": lambda data: data[:4096],
    "truncated to half": lambda data: data[: len(data) // 2],
    "replaced by text": lambda data: b"jobkeeper archive? no.\n" * 50,
    "header damaged": lambda data: b"\0" * 100 + data[100:],
}


def _copy(made: Made, tmp_path: Path) -> Path:
    keep = tmp_path / "keep"
    shutil.copytree(made.keep, keep)
    return keep


def _target(made: Made, which: str) -> str | None:
    if which == "-":
        return None
    named = {"flaky": made.flaky, "exact": made.exact, "queued": made.queued}
    return named.get(which) or made.done[int(which)]


def _exit(step: Callable[[], Any]) -> int:
    """The exit code the command line gives for ``step``: its exception's, or 0."""
    from jobkeeper.exceptions import JobkeeperError

    try:
        step()
    except JobkeeperError as exc:
        return exc.exit_code
    return 0


def _reads_refuse(made: Made, keeper: Keeper, job: str | None, tmp_path: Path) -> None:
    """No read command shows forged data as valid: ``verify`` and ``show`` fail,
    ``bundle`` refuses, ``counts`` refuses or gives the genuine (signed) counts (or none,
    for a job the edit set back to queued). Through the API the command line calls, with
    its exit codes (the command line itself runs on a share of the cases)."""
    from jobkeeper.cli._show import describe_job

    shown = job or made.done[0]

    def verify() -> None:
        if not keeper.verify().ok:
            raise VerificationError("does not verify")

    def show() -> None:
        details = describe_job(keeper, keeper.job(shown))
        assert "provenance verified" not in details.text
        if not details.data["verification"]["ok"]:
            raise VerificationError("show fails")

    got: list[str | None] = []

    def counts() -> None:
        result = keeper.job(shown).result
        values = None if result is None else dict(result.probabilities or result.counts or {})
        got.append(None if values is None else json.dumps(values, sort_keys=True))

    out = tmp_path / "out.json"
    assert _exit(verify) == 1
    assert _exit(show) == 1
    code = _exit(counts)
    assert code == 1 or got in ([made.counts[shown]], [None]), (code, got)
    assert _exit(lambda: keeper.bundle(out, [shown])) == 1 and not out.exists()


CASES = _cases()


def test_the_suite_is_large_enough() -> None:
    assert len(CASES) + len(FILE_CASES) >= 100


@pytest.mark.parametrize(("which", "edit"), [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_an_edit_to_the_archive_is_detected(
    made: Made, tmp_path: Path, capsys: pytest.CaptureFixture[str], which: str, edit: Any
) -> None:
    keep = _copy(made, tmp_path)
    job = _target(made, which)
    conn = sqlite3.connect(keep / "archive.db")
    with conn:
        edit(conn, job)
    conn.close()
    with Keeper.open(keep, create=False) as keeper:
        _reads_refuse(made, keeper, job, tmp_path)
    if which in ("0", "flaky") or which == "-":  # the command line itself, on a share
        code, out, err = _run(capsys, "verify", "--all", "--keep", str(keep))
        assert code == 1 and ("PROBLEM" in out or "damaged" in err), (out, err)


@pytest.mark.parametrize("damage", list(FILE_CASES), ids=list(FILE_CASES))
def test_a_damaged_archive_file_is_detected(
    made: Made, tmp_path: Path, capsys: pytest.CaptureFixture[str], damage: str
) -> None:
    keep = _copy(made, tmp_path)
    path = keep / "archive.db"
    path.write_bytes(FILE_CASES[damage](path.read_bytes()))
    code, _, err = _run(capsys, "verify", "--all", "--keep", str(keep))
    assert code == 3 and "Traceback" not in err, err
    for args in (
        ["show", made.done[0]],
        ["counts", made.done[0]],
        ["bundle", made.done[0], "-o", str(tmp_path / "out.json")],
    ):
        code, _, err = _run(capsys, *args, "--keep", str(keep))
        assert code == 3 and "Traceback" not in err, (args, err)


def test_a_deleted_archive_is_detected(
    made: Made, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    keep = _copy(made, tmp_path)
    (keep / "archive.db").unlink()
    assert _run(capsys, "verify", "--all", "--keep", str(keep))[0] == 3
    assert _run(capsys, "run", "x.qasm", "--keep", str(keep))[0] == 3  # not started afresh


# -- what no signature covers is shown as unsigned ----------------------------------------


def test_unsigned_annotations_are_shown_as_unsigned(
    made: Made, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    keep = _copy(made, tmp_path)
    conn = sqlite3.connect(keep / "archive.db")
    with conn:
        conn.execute("UPDATE job_labels SET label = 'edited' WHERE label = 'batch'")
        conn.execute("UPDATE jobs SET shots = 9999 WHERE state = 'queued'")
    conn.close()
    assert _run(capsys, "verify", "--all", "--keep", str(keep))[0] == 0  # nothing signed moved
    code, out, _ = _run(capsys, "show", made.done[0], "--keep", str(keep))
    assert code == 0 and "labels     edited  (unsigned)" in out and "provenance verified" in out
    code, out, _ = _run(capsys, "show", made.queued, "--keep", str(keep), "--json")
    data = json.loads(out)
    assert data["shots"] == 9999 and "shots" in data["unsigned"] and "labels" in data["unsigned"]
    code, out, _ = _run(capsys, "show", made.queued, "--keep", str(keep))
    assert "nothing about a queued job is signed" in out
    code, out, _ = _run(capsys, "jobs", "--keep", str(keep))
    assert "LABELS (UNSIGNED)" in out.splitlines()[0]


def test_forged_counts_are_refused_loudly_by_every_reader(
    made: Made, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    keep = _copy(made, tmp_path)
    a, b = made.done[:2]
    conn = sqlite3.connect(keep / "archive.db")
    with conn:
        _counts(_bump)(conn, a)
    conn.close()
    for args in (
        ["counts", a],
        ["show", a],
        ["compare", a, b],
        ["rerun", a],
        ["compare", a, "--ideal"],
    ):
        code, _, err = _run(capsys, *args, "--keep", str(keep))
        assert code == 1, args
        assert f"REFUSED: the result of job {a[:12]} is not shown" in err, args
    with Keeper.open(keep, create=False) as keeper, pytest.raises(Exception, match="REFUSED"):
        _ = keeper.job(a).counts


# -- edits to a bundle ---------------------------------------------------------------------


def _payload_edit(path: list[Any], value: Any) -> Callable[[dict[str, Any]], None]:
    def edit(statement: dict[str, Any]) -> None:
        node = statement
        for key in path[:-1]:
            node = node[key]
        node[path[-1]] = value(node.get(path[-1])) if callable(value) else value

    return edit


PAYLOAD = {
    "shots": _payload_edit(["predicate", "shots"], lambda v: v + 1),
    "seed": _payload_edit(["predicate", "seed"], lambda v: str(int(v) + 1)),
    "backend": _payload_edit(["predicate", "backend", "name"], "densitymatrix"),
    "backend version": _payload_edit(["predicate", "backend", "version"], "9"),
    "circuit": _payload_edit(["predicate", "circuit", "canonicalText"], lambda t: t + "\n"),
    "circuit hash": _payload_edit(["predicate", "circuit", "hash"], "sha256:" + "0" * 64),
    "options": _payload_edit(["predicate", "parameters", "options"], {"x": 1}),
    "repeat": _payload_edit(["predicate", "parameters", "repeat"], 3),
    "job key": _payload_edit(["predicate", "jobKey"], "sha256:" + "3" * 64),
    "submitted": _payload_edit(
        ["predicate", "timestamps", "submittedOn"], "2020-01-01T00:00:00.000Z"
    ),
    "finished": _payload_edit(
        ["predicate", "timestamps", "finishedOn"], "2020-01-01T00:00:00.000Z"
    ),
    "counts": _payload_edit(["predicate", "counts"], lambda c: _bump(c) if c else {"0": 1}),
    "attempts": _payload_edit(["predicate", "attempts"], []),
    "metadata digest": _payload_edit(["predicate", "resultMetadata"], "sha256:" + "4" * 64),
    "subject digest": lambda s: s["subject"][0]["digest"].update(sha256="5" * 64),
    "subject name": lambda s: s["subject"][0].update(name="other.json"),
    "predicate type": _payload_edit(["predicateType"], "https://example.invalid/v1"),
    "predicate type of the first version": _payload_edit(
        ["predicateType"], "https://jobkeeper.dev/attestation/run/v1"
    ),
    "register layout": _payload_edit(["predicate", "registers"], [{"name": "c", "width": 1}]),
    "register renamed": _payload_edit(["predicate", "registers", 0, "name"], "forged"),
    "register layout dropped": lambda s: s["predicate"].pop("registers"),
}


def _envelope_edit(change: Callable[[dict[str, Any]], None]) -> Callable[[dict[str, Any]], None]:
    return change


ENVELOPE = {
    "signature byte": lambda e: e["signatures"][0].update(
        sig=("B" if e["signatures"][0]["sig"][0] != "B" else "C") + e["signatures"][0]["sig"][1:]
    ),
    "keyid": lambda e: e["signatures"][0].update(keyid="0" * 64),
    "payload type": lambda e: e.update(payloadType="application/json"),
    "no signatures": lambda e: e.update(signatures=[]),
    "extra member": lambda e: e.update(note="unsigned"),
}

PROOF = {
    "proof hash": lambda p: [base64.b64encode(b"\0" * 32).decode(), *p[1:]],
    "proof shortened": lambda p: p[:-1],
    "proof lengthened": lambda p: [*p, p[0]],
}


def _resign(bundle: dict[str, Any]) -> None:
    """An attacker's key signs every envelope and the checkpoint, with proofs remade."""
    from jobkeeper.provenance.checkpoint import sign_checkpoint
    from jobkeeper.provenance.merkle import MerkleTree, leaf_hash

    key = Ed25519PrivateKey.generate()
    fp = fingerprint(key)
    envelopes = []
    for entry in bundle["entries"]:
        payload = base64.b64decode(entry["envelope"]["payload"])
        envelopes.append(
            json.loads(envelope_bytes(sign_envelope(payload, PAYLOAD_TYPE, key, keyid=fp)))
        )
    tree = MerkleTree(leaf_hash(envelope_bytes(env)) for env in envelopes)
    for i, (entry, env) in enumerate(zip(bundle["entries"], envelopes, strict=True)):
        entry.update(
            index=i,
            envelope=env,
            inclusionProof=[base64.b64encode(h).decode() for h in tree.inclusion_proof(i)],
        )
    bundle["checkpoint"] = sign_checkpoint(bundle["origin"], tree.size, tree.root(), key)
    pub = key.public_key().public_bytes_raw()
    bundle["keys"] = {fp: base64.b64encode(pub).decode()}


def _checkpoint_edit(change: Callable[[list[str]], list[str]]) -> Callable[[dict[str, Any]], None]:
    def edit(bundle: dict[str, Any]) -> None:
        bundle["checkpoint"] = "\n".join(change(bundle["checkpoint"].split("\n")))

    return edit


WHOLE_BUNDLE: dict[str, Callable[[dict[str, Any]], None]] = {
    "no entries": lambda b: b.update(entries=[]),
    "entry duplicated": lambda b: b["entries"].append(copy.deepcopy(b["entries"][0])),
    "indexes swapped": lambda b: (
        b["entries"][0].update(index=b["entries"][1]["index"]),
        b["entries"][1].update(index=0),
    ),
    "re-signed by another key": _resign,
    "origin": lambda b: b.update(origin="jobkeeper/forged"),
    "checkpoint size": _checkpoint_edit(lambda ls: [ls[0], str(int(ls[1]) + 1), *ls[2:]]),
    "checkpoint smaller": _checkpoint_edit(lambda ls: [ls[0], str(int(ls[1]) - 1), *ls[2:]]),
    "checkpoint root": _checkpoint_edit(
        lambda ls: [ls[0], ls[1], base64.b64encode(b"\1" * 32).decode(), *ls[3:]]
    ),
    "checkpoint origin": _checkpoint_edit(lambda ls: ["jobkeeper/forged", *ls[1:]]),
    "checkpoint unsigned": _checkpoint_edit(
        lambda ls: [line for line in ls if not line.startswith("\u2014")]
    ),
    "format": lambda b: b.update(format="jobkeeper-audit-bundle/v0"),
}


def _bundle_cases() -> list[tuple[str, Callable[[dict[str, Any]], None]]]:
    cases: list[tuple[str, Callable[[dict[str, Any]], None]]] = []
    for n in range(4):
        for name, change in PAYLOAD.items():

            def edit(b: dict[str, Any], n: int = n, change: Any = change) -> None:
                env = b["entries"][n]["envelope"]
                statement = json.loads(base64.b64decode(env["payload"]))
                change(statement)
                env["payload"] = base64.b64encode(json.dumps(statement).encode()).decode()

            cases.append((f"entry{n}: payload {name}", edit))
        for name, change in ENVELOPE.items():
            cases.append(
                (
                    f"entry{n}: envelope {name}",
                    lambda b, n=n, c=change: c(b["entries"][n]["envelope"]),
                )
            )
        for name, change in PROOF.items():
            cases.append(
                (
                    f"entry{n}: {name}",
                    lambda b, n=n, c=change: b["entries"][n].update(
                        inclusionProof=c(b["entries"][n]["inclusionProof"])
                    ),
                )
            )
        cases.append(
            (
                f"entry{n}: index moved",
                lambda b, n=n: b["entries"][n].update(index=b["entries"][n]["index"] + 5),
            )
        )
        cases.append(
            (
                f"entry{n}: removed",
                lambda b, n=n: (
                    b["entries"].pop(n) and None
                    if len(b["entries"]) == 1
                    else b["entries"].__setitem__(
                        n, copy.deepcopy(b["entries"][(n + 1) % len(b["entries"])])
                    )
                ),
            )
        )
    cases += list(WHOLE_BUNDLE.items())
    return cases


BUNDLE_CASES = _bundle_cases()


def test_the_bundle_suite_is_large_enough() -> None:
    assert len(BUNDLE_CASES) >= 100


def test_the_untouched_bundle_verifies(made: Made, capsys: pytest.CaptureFixture[str]) -> None:
    assert _run(capsys, "verify", str(made.bundle), "--keep", str(made.keep))[0] == 0


@pytest.mark.parametrize(("name", "edit"), BUNDLE_CASES, ids=[c[0] for c in BUNDLE_CASES])
def test_an_edit_to_a_bundle_is_detected(
    made: Made, tmp_path: Path, capsys: pytest.CaptureFixture[str], name: str, edit: Any
) -> None:
    data = json.loads(made.bundle.read_text())
    edit(data)
    _bundle_fails(made, tmp_path, capsys, data, cli=name.startswith(("entry0", "no entries")))


def _bundle_fails(
    made: Made,
    tmp_path: Path,
    capsys: pytest.CaptureFixture[str],
    data: dict[str, Any],
    *,
    cli: bool,
) -> None:
    forged = tmp_path / "forged.json"
    forged.write_text(json.dumps(data, indent=1))
    trust = load_trust(made.keep, KeyRing(made.keep / "keys"))
    assert not verify_bundle_file(forged, trust_set=trust).ok
    if cli:  # the command line itself, on a share of the cases
        code, out, err = _run(capsys, "verify", str(forged), "--keep", str(made.keep))
        assert code == 1 and "everything holds" not in out, (out, err)


def test_a_bundle_rolled_back_to_an_older_checkpoint_fails(
    made: Made, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    with Keeper.open(made.keep, create=False) as keeper:
        older = keeper.store.checkpoints()[0].note  # genuine, signed, and too short
    data = json.loads(made.bundle.read_text())
    data["checkpoint"] = older
    _bundle_fails(made, tmp_path, capsys, data, cli=True)


# -- batches: edits to points sealed by one batch statement ---------------------------------

BATCH_SCAN = """OPENQASM 3.0;
include "stdgates.inc";
input float[64] theta;
qubit[2] q;
bit[2] c;
h q[0];
rx(theta) q[1];
cx q[0], q[1];
c = measure q;
"""


@dataclass(frozen=True)
class Batch:
    keep: Path
    points: list[str]  # the batch's point jobs, in sweep order
    single: str  # a job sealed alone in the same keep


@pytest.fixture(scope="module")
def batch(tmp_path_factory: pytest.TempPathFactory) -> Batch:
    """A keep whose sweep of four points (an invented angle scan) was sealed as one
    batch by the real worker, beside one job sealed alone."""
    root = tmp_path_factory.mktemp("tamper-batch")
    program = root / "scan.qasm"
    program.write_text(BATCH_SCAN)
    with Keeper.open(root / "keep") as keeper:
        single = keeper.run(circuit_text(0.7), shots=32, seed=4).id
        run = keeper.submit_sweep(program, axes=["theta=0:1.5:4"], shots=64, seed=8)
        keeper.work(once=True, local_executor="thread", idle_sleep=0.05)
        points = [p.job_id for p in run.points]
        assert len(keeper.store.log_entries()) == 2 and keeper.verify().ok
    return Batch(root / "keep", points, single)


def _point_spec(change: Callable[[dict[str, Any]], None]) -> Callable[..., None]:
    def edit(conn: sqlite3.Connection, job: str) -> None:
        (text,) = conn.execute("SELECT spec FROM jobs WHERE id = ?", (job,)).fetchone()
        doc = json.loads(text)
        change(doc)
        conn.execute("UPDATE jobs SET spec = ? WHERE id = ?", (json.dumps(doc), job))

    return edit


BATCH_EDITS: dict[str, Callable[..., None]] = {
    "point count changed": _counts(_bump),
    "point counts moved": _counts(_shift),
    "point counts respaced": _sql(
        "UPDATE results SET counts = replace(counts, ':', ': ') WHERE job_id = :job"
    ),
    "point result deleted": _sql("DELETE FROM results WHERE job_id = :job"),
    "point shots": _sql("UPDATE jobs SET shots = shots + 1 WHERE id = :job"),
    "point job key": _sql(
        "UPDATE jobs SET job_key = 'sha256:' || hex(randomblob(32)) WHERE id = :job"
    ),
    "point state queued": _sql("UPDATE jobs SET state = 'queued' WHERE id = :job"),
    "point started time": _sql("UPDATE jobs SET started_at = started_at + 1 WHERE id = :job"),
    "point seed": _point_spec(lambda d: d.update(seed=int(d["seed"]) + 1)),
    "point binding": _point_spec(lambda d: d["bindings"][0].update(text="0.25")),
    "point template": _point_spec(lambda d: d["template"].update(text=BATCH_SCAN + "\n")),
    "point circuit": _point_spec(lambda d: d.update(circuit=d["circuit"].replace("h ", "x "))),
    "point metadata": _sql(
        "UPDATE results SET metadata = json_set(metadata, '$.method', 'forged') WHERE job_id = :job"
    ),
    "point left out of its batch": _sql("DELETE FROM batch_points WHERE job_id = :job"),
    "point moved to another batch": _sql(
        "UPDATE batch_points SET batch_id = 'bt-forged' WHERE job_id = :job"
    ),
    "batch entry deleted": _sql(
        "DELETE FROM log_entries WHERE job_id = "
        "(SELECT batch_id FROM batch_points WHERE job_id = :job)"
    ),
    "batch envelope byte": _sql(
        'UPDATE log_entries SET envelope = CAST(replace(CAST(envelope AS TEXT), \'"sig":"\', '
        '\'"sig":"A\') AS BLOB) WHERE job_id = '
        "(SELECT batch_id FROM batch_points WHERE job_id = :job)"
    ),
}


def _batch_cases() -> list[tuple[str, str, Any]]:
    cases = [(f"point{n}: {name}", str(n), edit)
             for n in (0, 3) for name, edit in BATCH_EDITS.items()]  # fmt: skip
    cases += [
        (
            "a lone job added to the batch",
            "single",
            _sql(
                "INSERT INTO batch_points (job_id, batch_id) SELECT :job, batch_id "
                "FROM batch_points LIMIT 1"
            ),
        ),
        ("batch list emptied", "-", _sql("DELETE FROM batch_points")),
    ]
    return cases


BATCH_CASES = _batch_cases()


@pytest.mark.parametrize(
    ("which", "edit"), [c[1:] for c in BATCH_CASES], ids=[c[0] for c in BATCH_CASES]
)
def test_an_edit_to_a_batch_is_detected(
    batch: Batch, tmp_path: Path, capsys: pytest.CaptureFixture[str], which: str, edit: Any
) -> None:
    keep = tmp_path / "keep"
    shutil.copytree(batch.keep, keep)
    job = batch.single if which == "single" else batch.points[int(which) if which != "-" else 0]
    with Keeper.open(keep, create=False) as genuine:
        signed = genuine.job(job).counts
    conn = sqlite3.connect(keep / "archive.db")
    with conn:
        edit(conn, job)
    conn.close()
    code, out, err = _run(capsys, "verify", "--all", "--keep", str(keep))
    assert code == 1 and "PROBLEM" in out, (out, err)
    with Keeper.open(keep, create=False) as keeper:
        got: list[Any] = []
        code = _exit(lambda: got.append(keeper.job(job).result))
        # A read refuses forged counts, or gives the signed ones (or none: not done).
        assert code == 1 or got[0] is None or dict(got[0].counts or {}) == signed, got
