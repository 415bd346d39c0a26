"""The asynchronous side every local simulator shares: it finishes inside ``start``."""

from __future__ import annotations

from jobkeeper.backend import Polled, Result, Started, Task
from jobkeeper.exceptions import PermanentBackendError


class RunsLocally:
    """``start`` runs ``execute`` at once (idempotent: the same task and seed give the same
    result, so the client key is not needed); there are never handles to poll or cancel."""

    name: str

    def execute(self, task: Task) -> Result:
        raise NotImplementedError

    async def start(self, task: Task, *, client_key: str) -> Started:
        return Started(result=self.execute(task))

    async def poll(self, handle: str) -> Polled:
        raise PermanentBackendError(self._no_handle(handle))

    async def cancel(self, handle: str) -> None:
        raise PermanentBackendError(self._no_handle(handle))

    async def aclose(self) -> None:
        return None

    def _no_handle(self, handle: str) -> str:
        return f"backend {self.name!r} finishes inside start: there is no handle {handle!r}"
