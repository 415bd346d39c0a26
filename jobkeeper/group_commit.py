"""Group commit for the worker: finished jobs are archived in batches. Whatever completed
while the previous batch committed goes in the next transaction, so the per-commit sync
(not the SQL, which is what a commit costs) is shared."""

from __future__ import annotations

import asyncio
import contextlib
from collections.abc import Awaitable, Callable, Sequence

from jobkeeper.store import Completion

#: Finished jobs archived per commit, and how long to wait for company.
GROUP_COMMIT = 32
GROUP_COMMIT_WAIT = 0.004

Commit = Callable[[Sequence[Completion]], Awaitable[list[bool]]]


class GroupCommit:
    """Collects completions and commits them together. ``commit`` archives a batch and
    says, per completion, whether its lease still held; ``in_hand`` is how many jobs the
    worker holds (when more are about to finish, a short wait lets them join the batch)."""

    def __init__(self, commit: Commit, in_hand: Callable[[], int]) -> None:
        self._commit = commit
        self._in_hand = in_hand
        self._queue: list[tuple[Completion, asyncio.Future[bool]]] = []
        self._wake = asyncio.Event()
        self._loop: asyncio.Task[None] | None = None

    def start(self) -> None:
        self._loop = asyncio.create_task(self._run())

    async def stop(self) -> None:
        if self._loop is not None:
            self._loop.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await self._loop
            self._loop = None

    async def archive(self, completion: Completion) -> bool:
        """Archive one completion with the next batch; False if its lease was lost."""
        future: asyncio.Future[bool] = asyncio.get_running_loop().create_future()
        self._queue.append((completion, future))
        self._wake.set()
        return await future

    async def _run(self) -> None:
        while True:
            await self._wake.wait()
            self._wake.clear()
            if len(self._queue) < GROUP_COMMIT and self._in_hand() > len(self._queue):
                # Others are about to finish: a few milliseconds' wait lets one synced
                # commit carry them all.
                await asyncio.sleep(GROUP_COMMIT_WAIT)
            batch, self._queue = self._queue, []
            if not batch:
                continue
            try:
                oks = await self._commit([c for c, _ in batch])
            except Exception as exc:
                for _, future in batch:
                    if not future.done():
                        future.set_exception(exc)
                continue
            for (_, future), ok in zip(batch, oks, strict=True):
                if not future.done():
                    future.set_result(ok)
