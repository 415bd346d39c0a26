"""The job list's reads, on both stores: pages newest first by a keyset cursor, with ties
in the creation time broken by id, filters that combine, and counts that agree."""

from __future__ import annotations

from jobkeeper.store import JobFilter, Store
from tests.integration.test_store_contract import new_job


def test_pages_cover_every_job_once_newest_first(store: Store) -> None:
    # Jobs enqueued in one transaction may share their creation time: the cursor's id
    # breaks the tie, so no job is skipped or shown twice.
    store.enqueue([new_job(labels=("a",)) for _ in range(5)])
    store.enqueue([new_job(labels=("b",), backend="other") for _ in range(3)])
    everything = sorted(store.list_jobs(), key=lambda j: (j.created_at, j.id), reverse=True)
    seen = []
    after = None
    for _ in range(10):  # bounded: 8 jobs at 3 a page
        page = store.page_jobs(JobFilter(), after=after, limit=3)
        seen += [job.id for job in page]
        if len(page) < 3:
            break
        after = (page[-1].created_at, page[-1].id)
    assert seen == [job.id for job in everything]
    assert store.count_jobs(JobFilter()) == 8


def test_filters_narrow_together(store: Store) -> None:
    store.enqueue([new_job(labels=("a",)) for _ in range(2)])
    store.enqueue([new_job(labels=("a",), backend="other"), new_job(backend="other")])
    for where, expected in (
        (JobFilter(label="a"), 3),
        (JobFilter(backend="other"), 2),
        (JobFilter(label="a", backend="other"), 1),
        (JobFilter(state="queued", label="a"), 3),
        (JobFilter(state="done"), 0),
        (JobFilter(until=0.0), 0),
        (JobFilter(since=0.0), 4),
    ):
        assert len(store.page_jobs(where, limit=50)) == expected, where
        assert store.count_jobs(where) == expected, where
