"""Where the loopback device keeps its jobs: a SQLite database, in a file when the device
is started with one (``--state FILE``), so that a restarted device still knows the jobs
it accepted, or in memory (gone when the process ends, as a device that forgets).

Every change of a job is written through at once (one small transaction); the device
reads all jobs back when it starts.
"""

from __future__ import annotations

import json
import sqlite3
import threading
from collections.abc import Iterator, Mapping
from typing import Any

_SCHEMA = """
CREATE TABLE IF NOT EXISTS jobs (
    id TEXT PRIMARY KEY,
    key TEXT NOT NULL UNIQUE,
    fingerprint BLOB NOT NULL,
    program TEXT,
    shots INTEGER NOT NULL,
    seed INTEGER NOT NULL,
    exact INTEGER NOT NULL,
    submitted_at REAL NOT NULL,
    running_at REAL NOT NULL,
    ready_at REAL NOT NULL,
    state TEXT NOT NULL,
    message TEXT NOT NULL,
    refusal TEXT,
    outcome TEXT,
    executed_at REAL,
    extra TEXT NOT NULL DEFAULT '{}'
)
"""
_COLUMNS = (
    "id", "key", "fingerprint", "program", "shots", "seed", "exact", "submitted_at",
    "running_at", "ready_at", "state", "message", "refusal", "outcome", "executed_at", "extra",
)  # fmt: skip
_UPSERT = (
    f"INSERT OR REPLACE INTO jobs ({', '.join(_COLUMNS)}) "
    f"VALUES ({', '.join('?' for _ in _COLUMNS)})"
)


class DeviceState:
    """The device's jobs in SQLite (``path`` a file, or ``":memory:"``)."""

    def __init__(self, path: str = ":memory:") -> None:
        self.path = path
        self.persistent = path != ":memory:"
        # one connection, used from the device's event loop and (rarely) a thread of the
        # pool that computes results: a lock keeps them apart
        self._lock = threading.Lock()
        try:
            self._db = sqlite3.connect(path, check_same_thread=False, isolation_level=None)
            self._db.execute("PRAGMA journal_mode=WAL")
            self._db.execute("PRAGMA synchronous=NORMAL")
            self._db.execute(_SCHEMA)
        except sqlite3.Error as exc:
            raise ValueError(f"cannot keep the device's state in {path}: {exc}") from None

    def rows(self) -> Iterator[dict[str, Any]]:
        """Every saved job as a mapping of its fields, in the order they were accepted."""
        with self._lock:
            found = self._db.execute(f"SELECT {', '.join(_COLUMNS)} FROM jobs ORDER BY id")
            rows = found.fetchall()
        for row in rows:
            fields = dict(zip(_COLUMNS, row, strict=True))
            fields["exact"] = bool(fields["exact"])
            fields["outcome"] = _outcome(fields["outcome"])
            fields["extra"] = json.loads(fields["extra"])
            yield fields

    def save(self, fields: Mapping[str, Any]) -> None:
        """Write one job's fields (insert or replace)."""
        values = dict(fields)
        outcome = values.get("outcome")
        values["outcome"] = json.dumps(list(outcome)) if outcome is not None else None
        values["extra"] = json.dumps(values.get("extra") or {}, sort_keys=True)
        values["exact"] = int(bool(values["exact"]))
        with self._lock:
            self._db.execute(_UPSERT, [values[c] for c in _COLUMNS])

    def close(self) -> None:
        with self._lock:
            self._db.close()


def _outcome(text: str | None) -> tuple[str, dict[str, Any]] | None:
    if text is None:
        return None
    kind, values = json.loads(text)
    return str(kind), dict(values)
