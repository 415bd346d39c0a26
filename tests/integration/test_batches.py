"""Batches: a worker claims many due points of one sweep at once and seals them with one
signed statement and one log entry, while every point stays verifiable alone.

Checked: the claim takes points of one sweep only (both stores; a claimed point is
never claimed again), a batch commit is all or nothing, a point's counts are
those the single-job path gives for the same seed (its counts never depend on its
batch), verify passes and every reader reads a point as a job, and a bundle of one
point carries the batch envelope and that point's counts document only and verifies
offline in another keep. The program is invented for the tests: an angle scan.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.cli import main
from jobkeeper.provenance.batch import BATCH_PREDICATE_TYPE
from jobkeeper.provenance.dsse import b64decode_strict
from jobkeeper.store import Store
from tests.integration.test_store_contract import appender, completion, new_job
from tests.integration.test_store_sweeps import jobs_of, sweep_of

SCAN = """OPENQASM 3.0;
include "stdgates.inc";
input float[64] theta;
qubit[3] q;
bit[3] c;
h q[0];
rx(theta) q[1];
cx q[0], q[2];
crz(theta / 2) q[1], q[2];
c = measure q;
"""


def test_claim_batch_takes_due_points_of_one_sweep(store: Store) -> None:
    store.enqueue([new_job()])  # no sweep's point: never in a batch
    sweep_a, _ = store.enqueue_sweep(sweep_of(5, key="sha256:a"), jobs_of(5, "a"))
    sweep_b, _ = store.enqueue_sweep(sweep_of(3, key="sha256:b"), jobs_of(3, "b"))
    first = store.claim_batch("w1", limit=3, lease_seconds=60)
    points_a = [p.job_id for p in store.sweep_points(sweep_a)]
    assert [c.job.id for c in first] == points_a[:3]  # in the sweep's order
    second = store.claim_batch("w2", limit=10, lease_seconds=60)
    assert {c.job.id for c in second} == set(points_a[3:])  # never a claimed one again
    third = store.claim_batch("w3", limit=10, lease_seconds=60)
    assert {c.job.id for c in third} == {p.job_id for p in store.sweep_points(sweep_b)}
    assert store.claim_batch("w4", limit=10, lease_seconds=60) == []
    assert len(store.claim("w5", limit=10, lease_seconds=60)) == 1  # the lone job


def test_finish_batch_is_all_or_nothing(store: Store) -> None:
    store.enqueue_sweep(sweep_of(3), jobs_of(3))
    claims = store.claim_batch("w", limit=3, lease_seconds=60)
    stale = [completion(c) for c in claims]
    stale[1] = completion(type(claims[1])(claims[1].job, claims[1].token + 5, claims[1].was))
    assert store.finish_batch("bt-1", stale, b'{"a":1}', "signer", appender) == [
        True, False, True,
    ]  # fmt: skip
    assert store.log_entries() == [] and store.result(claims[0].job.id) is None
    kept = [completion(c) for c in claims]
    assert store.finish_batch("bt-2", kept, b'{"a":2}', "signer", appender) == [True] * 3
    [entry] = store.log_entries()
    assert entry.job_id == "bt-2"
    assert store.log_entry_for(claims[2].job.id) == entry
    assert {k: sorted(v) for k, v in store.batch_members().items()} == {
        "bt-2": sorted(c.job.id for c in claims)
    }


def _keep(tmp_path: Path, name: str) -> Path:
    keep = tmp_path / name
    (tmp_path / "scan.qasm").write_text(SCAN)
    return keep


def test_a_batch_is_one_statement_and_each_point_reads_as_a_job(tmp_path: Path) -> None:
    program = tmp_path / "scan.qasm"
    _keep(tmp_path, "batch")
    axes = ["theta=0:3:13"]
    with Keeper.open(tmp_path / "batch") as keeper:
        run = keeper.submit_sweep(program, axes=axes, shots=300, seed=21)
        stats = keeper.work(once=True, local_executor="thread", idle_sleep=0.05)
        assert stats.done == 13
        entries = keeper.store.log_entries()
        assert len(entries) == 1 and entries[0].job_id.startswith("bt-")
        statement = json.loads(
            b64decode_strict(json.loads(entries[0].envelope)["payload"], "payload")
        )
        assert statement["predicateType"] == BATCH_PREDICATE_TYPE
        jobs = run.jobs
        assert [s["name"] for s in statement["subject"]] == [j.record.job_key for j in jobs]
        assert statement["predicate"]["template"]["text"] == SCAN  # once, not per point
        batched = {j.record.job_key: j.counts for j in jobs}
        assert keeper.verify().ok
        judgement = keeper.rerun(jobs[4].id)  # from the point's signed record alone
        assert judgement.record.verdict == "identical"
    # The same points one job at a time, in another keep: the same counts, point by point
    # (a point's counts never depend on the batch it ran in).
    with Keeper.open(tmp_path / "single") as keeper:
        run = keeper.submit_sweep(program, axes=axes, shots=300, seed=21)
        keeper.work(once=True, local_executor="thread", idle_sleep=0.05, batches=False)
        assert len(keeper.store.log_entries()) == 13
        assert {j.record.job_key: j.counts for j in run.jobs} == batched


def test_a_bundle_of_one_point_verifies_offline(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    program = tmp_path / "scan.qasm"
    _keep(tmp_path, "batch")
    with Keeper.open(tmp_path / "batch") as keeper:
        run = keeper.submit_sweep(program, axes=["theta=0:1:6"], shots=100, seed=5)
        keeper.work(once=True, local_executor="thread", idle_sleep=0.05)
        point = run.jobs[2]
        fingerprint = keeper.keys()[0].fingerprint
    bundle = tmp_path / "point.json"
    assert main(["bundle", point.id, "-o", str(bundle), "--keep", str(tmp_path / "batch")]) == 0
    data = json.loads(bundle.read_text())
    [entry] = data["entries"]
    # That point's counts document only, under its job key.
    assert list(entry["documents"]) == [point.record.job_key]
    capsys.readouterr()
    other = ["--keep", str(tmp_path / "other")]
    assert main(["verify", str(bundle), "--key", fingerprint, *other]) == 0
    for name, change in {
        "document": lambda e: e["documents"].update(
            {k: v.replace(":", ": ") for k, v in e["documents"].items()}
        ),
        "documents removed": lambda e: e.pop("documents"),
        "another job key": lambda e: e.update(
            documents={"sha256:" + "0" * 64: next(iter(e["documents"].values()))}
        ),
    }.items():
        forged = json.loads(bundle.read_text())
        change(forged["entries"][0])
        path = tmp_path / f"forged-{name.replace(' ', '-')}.json"
        path.write_text(json.dumps(forged))
        assert main(["verify", str(path), "--key", fingerprint, *other]) == 1, name
