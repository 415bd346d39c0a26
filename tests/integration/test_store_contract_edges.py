"""More of the Store contract, on both stores: every move a store makes is one the
queue's transition table allows, and a driver error raised inside a transaction comes
out as our own StoreError with the transaction undone (errors translated at the edge:
common practice, see STYLE.md example 5)."""

from __future__ import annotations

import sqlite3
import time
from pathlib import Path

import pytest

from jobkeeper.exceptions import StoreError, StoreUnavailable
from jobkeeper.queue import JobState
from jobkeeper.store import Store
from tests.integration.test_store_contract import appender, completion, new_job


class Moves:
    """Watches one job's state and fails on a move the table does not list."""

    def __init__(self, the_store: Store, job_id: str) -> None:
        self.store, self.job_id = the_store, job_id
        self.state = the_store.get(job_id).state
        self.seen: list[tuple[JobState, JobState]] = []

    def check(self) -> JobState:
        now = self.store.get(self.job_id).state
        if now != self.state:
            assert self.state.can_move_to(now), f"{self.state} → {now} is not in the table"
            self.seen.append((self.state, now))
            self.state = now
        return now


def test_every_move_a_store_makes_is_in_the_transition_table(store: Store) -> None:
    seen: set[tuple[JobState, JobState]] = set()
    # a remote job: start, wait, poll, fail transiently, poll again, finish; each call is
    # followed by a look at the state
    [(job, _)] = store.enqueue([new_job(max_attempts=5)])
    moves = Moves(store, job.id)

    def claim_it(lease: float = 60.0) -> int:
        [claim] = store.claim("w", limit=1, lease_seconds=lease)
        assert moves.check() == JobState.RUNNING
        return claim.token

    token = claim_it()
    store.record_handle(job.id, token, "h-1", 0.0)
    moves.check()
    token = claim_it()
    store.snooze(job.id, token, 0.0)
    moves.check()
    token = claim_it()
    store.retry(job.id, token, "TransientBackendError", "busy", 0.0)
    assert moves.check() == JobState.WAITING  # a handle was recorded
    token = claim_it()
    store.release("w", [(job.id, token)])
    moves.check()
    claim_it(lease=0.0)
    time.sleep(0.01)
    assert store.requeue_expired() == 1
    moves.check()
    [claim] = store.claim("w", limit=1, lease_seconds=60)
    moves.check()
    assert store.finish([completion(claim)], appender) == [True]
    assert moves.check() == JobState.DONE
    seen.update(moves.seen)
    # local jobs: one fails, one is cancelled while queued, one while running, and one
    # runs out of attempts
    for end in ("fail", "cancel-queued", "cancel-running", "retry-out"):
        [(job, _)] = store.enqueue([new_job(max_attempts=2)])
        moves = Moves(store, job.id)
        if end == "cancel-queued":
            store.request_cancel(job.id)
        else:
            [claim] = store.claim("w", limit=1, lease_seconds=60)
            moves.check()
            if end == "fail":
                store.fail(job.id, claim.token, "PermanentBackendError", "no")
            elif end == "retry-out":
                store.retry(job.id, claim.token, "TransientBackendError", "busy", 0.0)
                assert moves.check() == JobState.QUEUED  # one attempt left
                [claim] = store.claim("w", limit=1, lease_seconds=60)
                moves.check()
                store.retry(job.id, claim.token, "TransientBackendError", "busy", 0.0)
            else:
                store.request_cancel(job.id)
                store.mark_cancelled(job.id, claim.token)
        assert moves.check().terminal
        seen.update(moves.seen)
    # every move of the table was made by some store call above
    everything = {(a, b) for a in JobState for b in JobState if a.can_move_to(b)}
    assert seen == everything


def test_a_driver_error_inside_a_transaction_is_ours_and_undoes_it(store: Store) -> None:
    [(first, _)] = store.enqueue([new_job()])
    other = new_job()
    clash = new_job(id=first.id)  # same primary key, another job key
    with pytest.raises(StoreError) as caught:
        store.enqueue([other, clash])
    assert not isinstance(caught.value, StoreUnavailable)
    assert [j.id for j in store.list_jobs()] == [first.id]  # `other` was rolled back too


def test_sqlite_waits_on_the_busy_code_not_on_the_message(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from jobkeeper.store import sqlite as sqlite_store
    from jobkeeper.store import sqlite_edge

    path = tmp_path / "archive.db"
    with sqlite_store.SqliteStore(path) as the_store:
        holder = sqlite3.connect(path, isolation_level=None, timeout=0)
        holder.execute("BEGIN IMMEDIATE")
        try:
            other = sqlite3.connect(path, isolation_level=None, timeout=0)
            with pytest.raises(sqlite3.OperationalError) as real:
                other.execute("BEGIN IMMEDIATE")
            # SQLite's C API result code (sqlite.org/rescode.html): SQLITE_BUSY is 5.
            assert real.value.sqlite_errorcode == 5 and sqlite_edge.is_busy(real.value)
            other.close()
            # A message that merely mentions a lock carries no code: not waited on.
            assert not sqlite_edge.is_busy(sqlite3.OperationalError("database is locked"))
            monkeypatch.setattr(sqlite_edge, "BUSY_DEADLINE_SECONDS", 0.2)
            started = time.monotonic()
            with pytest.raises(StoreUnavailable, match="stayed locked"):
                the_store.enqueue([new_job()])
            assert time.monotonic() - started >= 0.2
        finally:
            holder.execute("ROLLBACK")
            holder.close()
        the_store.enqueue([new_job()])  # the lock is gone: the write goes through
        assert len(the_store.list_jobs()) == 1


def test_labels_are_a_set_and_a_deduplicated_submission_adds_its_own(store: Store) -> None:
    first = new_job("sha256:lab", labels=("fig2",))
    [(job, created)] = store.enqueue([first])
    assert created and job.labels == ("fig2",)
    # the same job again, under another label and the same one twice: one job, both labels
    [(again, created)] = store.enqueue([new_job("sha256:lab", labels=("fig3", "fig3", "fig2"))])
    assert not created and again.id == job.id and again.labels == ("fig2", "fig3")
    [claim] = store.claim("w", limit=1, lease_seconds=60)
    assert claim.job.labels == ("fig2", "fig3")
    assert store.finish([completion(claim)], appender) == [True]
    # after it is done, a third label still reaches it (a figure reuses an archived run)
    [(done, created)] = store.enqueue([new_job("sha256:lab", labels=("fig4",))])
    assert not created and done.state == "done" and done.labels == ("fig2", "fig3", "fig4")
    [(other, _)] = store.enqueue([new_job(labels=("fig3",))])
    assert store.get(job.id[:10]).labels == ("fig2", "fig3", "fig4")
    assert [j.id for j in store.list_jobs(label="fig3")] == [job.id, other.id]
    assert [j.id for j in store.list_jobs(label="fig4", state="done")] == [job.id]
    assert store.list_jobs(label="nope") == []
    assert [j.labels for j in store.get_many([other.id, job.id])] == [
        ("fig3",), ("fig2", "fig3", "fig4"),
    ]  # fmt: skip


def test_a_new_job_without_labels_has_none(store: Store) -> None:
    [(job, _)] = store.enqueue([new_job()])
    assert job.labels == () and store.get(job.id).labels == ()
