"""The Store contract, run against every store implementation on real databases.

Each rule checked here is one the queue-reliability notes single out (common practice of
durable job queues): unique keys enforced by an index with INSERT … ON CONFLICT, claims as
one short transaction, every later write fenced on (job, lease token), rescues as one
conditional update, results archived at most once.
"""

from __future__ import annotations

import dataclasses
import hashlib
import uuid
from collections.abc import Sequence

import numpy as np
import pytest

from jobkeeper.audit.sealing import _pack, _unpack, frontier_append, frontier_root
from jobkeeper.counts import CountTable
from jobkeeper.exceptions import AmbiguousJobId, JobNotFound, LeaseLost
from jobkeeper.spec import JobSpec
from jobkeeper.store import Completion, NewJob, Store

SPEC = JobSpec(circuit_text="x", circuit_hash="sha256:" + "0" * 64, backend="sim", shots=100,
               seed=12345)  # fmt: skip


def new_job(key: str | None = None, **fields) -> NewJob:
    defaults = dict(
        id=uuid.uuid4().hex, job_key=key or f"sha256:{uuid.uuid4().hex}", spec=SPEC,
        max_attempts=3,
    )  # fmt: skip
    if "backend" in fields:
        defaults["spec"] = dataclasses.replace(SPEC, backend=fields.pop("backend"))
    defaults.update(fields)
    return NewJob(**defaults)


def appender(state: bytes | None, size: int, envelopes: Sequence[bytes]):
    frontier = _unpack(state)
    leaves = [hashlib.sha256(b"\x00" + e).digest() for e in envelopes]
    for leaf in leaves:
        frontier_append(frontier, leaf)
    root = frontier_root(frontier)
    return leaves, _pack(frontier), root, f"test\n{size + len(leaves)}\n{root.hex()}\n"


def completion(claim, counts=None) -> Completion:
    return Completion(
        job_id=claim.job.id, token=claim.token, result_counts=counts or {"0": 1},
        result_probabilities=None, metadata={"seed": "1"},
        envelope=f"envelope-{claim.job.id}".encode(), signer="f" * 64,
    )  # fmt: skip


def test_enqueue_deduplicates_live_and_done_jobs(store: Store) -> None:
    first = new_job("sha256:k1")
    [(job, created)] = store.enqueue([first])
    assert created and job.state == "queued"
    [(again, created)] = store.enqueue([new_job("sha256:k1")])
    assert not created and again.id == first.id
    [claim] = store.claim("w", limit=5, lease_seconds=60)
    assert store.finish([completion(claim)], appender) == [True]
    [(after_done, created)] = store.enqueue([new_job("sha256:k1")])
    assert not created and after_done.id == first.id and after_done.state == "done"


def test_failed_and_cancelled_jobs_do_not_block_a_new_submission(store: Store) -> None:
    [(job, _)] = store.enqueue([new_job("sha256:k2")])
    store.request_cancel(job.id)
    [(fresh, created)] = store.enqueue([new_job("sha256:k2")])
    assert created and fresh.id != job.id


def test_claim_takes_due_jobs_oldest_first_with_a_new_token(store: Store) -> None:
    ids = [store.enqueue([new_job()])[0][0].id for _ in range(5)]
    claims = store.claim("w1", limit=3, lease_seconds=60)
    assert [c.job.id for c in claims] == ids[:3]
    assert all(c.token == 1 and c.job.state == "running" and c.was == "queued" for c in claims)
    assert all(c.job.lease_owner == "w1" for c in claims)
    rest = store.claim("w2", limit=10, lease_seconds=60)
    assert [c.job.id for c in rest] == ids[3:]
    assert store.claim("w3", limit=10, lease_seconds=60) == []


def test_claim_can_be_limited_to_backends_or_ids(store: Store) -> None:
    a = store.enqueue([new_job(backend="a")])[0][0]
    b = store.enqueue([new_job(backend="b")])[0][0]
    assert [c.job.id for c in store.claim("w", limit=5, lease_seconds=60, backends=["b"])] == [b.id]
    assert [c.job.id for c in store.claim("w", limit=5, lease_seconds=60, ids=[a.id])] == [a.id]


def test_a_worker_that_lost_its_lease_cannot_write(store: Store) -> None:
    store.enqueue([new_job()])
    [stale] = store.claim("old", limit=1, lease_seconds=-1.0)  # expires at once
    assert store.requeue_expired() == 1
    [fresh] = store.claim("new", limit=1, lease_seconds=60)
    assert fresh.job.id == stale.job.id and fresh.token == stale.token + 1
    # Every write by the old holder is refused and changes nothing.
    assert store.finish([completion(stale)], appender) == [False]
    with pytest.raises(LeaseLost):
        store.retry(stale.job.id, stale.token, "E", "late", 0.0)
    with pytest.raises(LeaseLost):
        store.record_handle(stale.job.id, stale.token, "h", 1.0)
    with pytest.raises(LeaseLost):
        store.fail(stale.job.id, stale.token, "E", "late")
    assert store.renew("old", [(stale.job.id, stale.token)], 60) == set()
    job = store.get(stale.job.id)
    assert job.state == "running" and job.lease_owner == "new" and job.attempts == 0
    assert store.result(job.id) is None and store.attempts(job.id) == []
    assert store.finish([completion(fresh)], appender) == [True]


def test_results_are_archived_once(store: Store) -> None:
    store.enqueue([new_job()])
    [claim] = store.claim("w", limit=1, lease_seconds=60)
    assert store.finish([completion(claim, {"01": 3})], appender) == [True]
    assert store.finish([completion(claim, {"01": 4})], appender) == [False]
    result = store.result(claim.job.id)
    assert result is not None and dict(result.counts or {}) == {"01": 3}
    assert len(store.log_entries()) == 1 and store.get(claim.job.id).state == "done"


def test_retry_backs_off_and_fails_with_history_when_out_of_attempts(store: Store) -> None:
    [(job, _)] = store.enqueue([new_job(max_attempts=2)])
    [claim] = store.claim("w", limit=1, lease_seconds=60)
    assert store.retry(job.id, claim.token, "TransientBackendError", "busy", 3600.0) == "queued"
    assert store.claim("w", limit=1, lease_seconds=60) == []  # not due for an hour
    [(job2, _)] = store.enqueue([new_job(max_attempts=2)])
    [claim2] = store.claim("w", limit=1, lease_seconds=60)
    assert store.retry(job2.id, claim2.token, "TransientBackendError", "one", 0.0) == "queued"
    [claim3] = store.claim("w", limit=1, lease_seconds=60)
    assert claim3.job.id == job2.id
    assert store.retry(job2.id, claim3.token, "TransientBackendError", "two", 0.0) == "failed"
    final = store.get(job2.id)
    assert final.state == "failed" and final.attempts == 2 and final.error == "two"
    assert [a.message for a in store.attempts(job2.id)] == ["one", "two"]


def test_remote_jobs_wait_as_rows_and_are_claimed_again_to_poll(store: Store) -> None:
    [(job, _)] = store.enqueue([new_job()])
    [claim] = store.claim("w", limit=1, lease_seconds=60)
    store.record_handle(job.id, claim.token, "remote-7", 0.0)
    waiting = store.get(job.id)
    assert waiting.state == "waiting" and waiting.handle == "remote-7"
    assert waiting.lease_owner is None
    [poll] = store.claim("w", limit=1, lease_seconds=60)
    assert poll.was == "waiting" and poll.job.handle == "remote-7"
    store.snooze(job.id, poll.token, 3600.0)
    assert store.claim("w", limit=1, lease_seconds=60) == []
    # An expired lease on a job with a handle goes back to waiting, not queued.
    [(other, _)] = store.enqueue([new_job()])
    [c] = store.claim("w", limit=1, lease_seconds=60)
    store.record_handle(other.id, c.token, "remote-8", 0.0)
    store.claim("w", limit=1, lease_seconds=-1.0)
    store.requeue_expired()
    assert store.get(other.id).state == "waiting"


def test_cancel_queued_at_once_and_waiting_on_request(store: Store) -> None:
    [(queued, _)] = store.enqueue([new_job()])
    assert store.request_cancel(queued.id).state == "cancelled"
    [(remote, _)] = store.enqueue([new_job()])
    [claim] = store.claim("w", limit=1, lease_seconds=60)
    store.record_handle(remote.id, claim.token, "h", 3600.0)
    asked = store.request_cancel(remote.id)
    assert asked.state == "waiting" and asked.cancel_requested
    [again] = store.claim("w", limit=1, lease_seconds=60)  # due at once now
    store.mark_cancelled(remote.id, again.token)
    assert store.get(remote.id).state == "cancelled"


def test_job_ids_by_prefix(store: Store) -> None:
    store.enqueue([new_job(id="abc123" + "0" * 26), new_job(id="abc456" + "0" * 26)])
    assert store.get("abc1").id.startswith("abc123")
    with pytest.raises(AmbiguousJobId):
        store.get("abc")
    with pytest.raises(JobNotFound):
        store.get("fff")
    with pytest.raises(JobNotFound):
        store.get("not-hex")


def test_log_and_checkpoints_grow_with_each_finishing_transaction(store: Store) -> None:
    store.enqueue([new_job() for _ in range(5)])
    claims = store.claim("w", limit=5, lease_seconds=60)
    store.finish([completion(c) for c in claims[:2]], appender)
    store.finish([completion(c) for c in claims[2:]], appender)
    entries = store.log_entries()
    assert [e.index for e in entries] == [0, 1, 2, 3, 4]
    assert [cp.size for cp in store.checkpoints()] == [2, 5]
    # The saved compact range gives the same root as hashing all leaves (RFC 9162 §2.1).
    from jobkeeper.provenance.merkle import root

    assert store.checkpoints()[-1].root == root([e.leaf_hash for e in entries])


def test_spent_sums_costs_of_live_and_done_jobs(store: Store) -> None:
    store.enqueue([new_job(cost=2.5, labels=("x",)), new_job(cost=1.0)])
    [(cancelled, _)] = store.enqueue([new_job(cost=100.0, labels=("x",))])
    store.request_cancel(cancelled.id)
    assert store.spent() == pytest.approx(3.5)
    assert store.spent("x") == pytest.approx(2.5)


def test_comparisons_are_archived_with_a_log_entry(store: Store) -> None:
    from jobkeeper.store import ComparisonRecord

    [(a, _)] = store.enqueue([new_job()])
    [(b, _)] = store.enqueue([new_job()])
    record = ComparisonRecord(id="c" * 32, kind="pair", job_a=a.id, job_b=b.id,
                              verdict="consistent", report='{"kind":"pair"}')  # fmt: skip
    store.record_comparison(record, b"comparison-envelope", "f" * 64, appender)
    [got] = store.comparisons(a.id)
    assert (got.id, got.kind, got.job_b, got.verdict, got.report) == (
        record.id, "pair", b.id, "consistent", '{"kind":"pair"}')  # fmt: skip
    assert store.comparisons(b.id) == [got] and store.comparisons("0" * 32) == []
    [entry] = store.log_entries()
    assert entry.job_id == record.id and entry.envelope == b"comparison-envelope"
    assert [cp.size for cp in store.checkpoints()] == [1]


def test_counts_are_kept_as_the_canonical_counts_document(store: Store) -> None:
    store.enqueue([new_job()])
    [claim] = store.claim("w", limit=1, lease_seconds=60)
    store.finish([completion(claim, {"11": 7, "00": 5})], appender)
    # RFC 8785 §3.2.3: members sorted by key, no whitespace.
    assert store.all_counts() == {claim.job.id: '{"00":5,"11":7}'}


def test_ensure_meta_sets_once(store: Store) -> None:
    assert store.ensure_meta("origin", "first") == "first"
    assert store.ensure_meta("origin", "second") == "first"
    assert store.get_meta("origin") == "first"


def test_a_count_table_is_kept_as_the_same_canonical_document(store: Store) -> None:
    store.enqueue([new_job()])
    [claim] = store.claim("w", limit=1, lease_seconds=60)
    rows = np.frombuffer(b"11|100|0", dtype=np.uint8).reshape(2, 4)
    store.finish([completion(claim, CountTable(rows, np.array([7, 5])))], appender)
    # RFC 8785 §3.2.3: members sorted by key ("00|0" before "11|1"), no whitespace.
    assert store.all_counts() == {claim.job.id: '{"00|0":5,"11|1":7}'}
    assert store.result(claim.job.id).counts == {"00|0": 5, "11|1": 7}
