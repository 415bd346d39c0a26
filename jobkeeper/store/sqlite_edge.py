"""The SQLite store's edge: its errors turned into ours (a busy database waited for, a
disk or file that refuses the work reported as a fault), and how an archive is opened
where it cannot be written."""

from __future__ import annotations

import os
import random
import sqlite3
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TypeVar

from jobkeeper.exceptions import StoreError, StoreFault, StoreUnavailable

T = TypeVar("T")
BUSY_DEADLINE_SECONDS = 60.0
#: SQLite's primary result codes for "another connection holds the lock" (extended codes
#: such as SQLITE_BUSY_SNAPSHOT carry the primary code in their low byte).
_BUSY_CODES = frozenset({sqlite3.SQLITE_BUSY, sqlite3.SQLITE_LOCKED})


def is_busy(exc: sqlite3.Error) -> bool:
    """Whether ``exc`` says the database is locked by another connection (worth waiting
    for), read from SQLite's result code rather than the wording of its message."""
    code = getattr(exc, "sqlite_errorcode", None)
    return isinstance(code, int) and (code & 0xFF) in _BUSY_CODES


def patiently(step: Callable[[], T], *, what: str) -> T:
    """Run ``step``, again after a short random sleep while SQLite reports the database
    busy, for up to :data:`BUSY_DEADLINE_SECONDS`. The random sleeps are the fairness rule
    of :mod:`jobkeeper.store.sqlite`. A busy database past the deadline is StoreUnavailable."""
    deadline = time.monotonic() + BUSY_DEADLINE_SECONDS
    while True:
        try:
            return step()
        except sqlite3.Error as exc:
            if not is_busy(exc):
                raise
            if time.monotonic() > deadline:
                raise StoreUnavailable(
                    f"{what} stayed locked for {BUSY_DEADLINE_SECONDS:.0f} s"
                ) from exc
        time.sleep(random.uniform(0.0005, 0.004))


#: SQLite's primary result codes for a disk or file that refuses the work (sqlite.org/
#: rescode.html): waiting does not mend them, so they are StoreFault, and why, in words.
_FAULTS = {
    13: "the disk is full",  # SQLITE_FULL
    8: "it is read-only here",  # SQLITE_READONLY
    10: "the disk reported an I/O error",  # SQLITE_IOERR
    11: "the database file is damaged",  # SQLITE_CORRUPT
    26: "the file is not a database",  # SQLITE_NOTADB
}


def fault_of(exc: sqlite3.Error, what: str, disk: Path | None = None) -> StoreFault | None:
    """The StoreFault that ``exc`` reports (full, read-only, I/O error, damaged), read
    from SQLite's result code; None for any other error. An I/O error on a ``disk`` with
    no space left is named as the full disk it is (SQLite reports one when it cannot
    grow its shared-memory file)."""
    code = getattr(exc, "sqlite_errorcode", None)
    reason = _FAULTS.get(code & 0xFF) if isinstance(code, int) else None
    if reason is None:
        return None
    if reason == _FAULTS[10] and disk is not None and _no_space(disk):
        reason = _FAULTS[13]
    return StoreFault(f"{what}: {reason} (SQLite: {exc}); no job was marked failed for it")


def _primary_code(fault: StoreFault) -> int | None:
    code = getattr(fault.__cause__, "sqlite_errorcode", None)
    return code & 0xFF if isinstance(code, int) else None


def disk_refused(fault: StoreFault) -> bool:
    """Whether ``fault`` is the disk refusing to write (full, an I/O error), so that the
    archive may still be read, rather than a damaged or foreign file."""
    return _primary_code(fault) in (10, 13)


def full_disk_shm(fault: StoreFault, disk: Path) -> bool:
    """Whether ``fault`` is SQLite failing to grow its shared-memory file on a disk with
    no space left (an I/O error): a read-only connection needs no such file."""
    return _primary_code(fault) == 10 and _no_space(disk)


def _no_space(disk: Path) -> bool:
    try:
        stat = os.statvfs(disk)
    except OSError:
        return False
    return stat.f_bavail == 0


@contextmanager
def map_errors(what: str, disk: Path | None = None) -> Iterator[None]:
    """The store's edge: a ``sqlite3`` error raised inside becomes one of ours. A disk or
    file that refuses the work (full, read-only, I/O error, damaged) is StoreFault; a
    database that cannot be opened or stays locked is StoreUnavailable (both exit 3);
    anything else the driver refuses is a StoreError. ``disk``: the archive's directory."""
    try:
        yield
    except sqlite3.Error as exc:
        fault = fault_of(exc, what, disk)
        if fault is not None:
            raise fault from exc
        if isinstance(exc, sqlite3.OperationalError) or type(exc) is sqlite3.DatabaseError:
            raise StoreUnavailable(f"{what}: {exc}") from exc
        raise StoreError(f"{what}: {exc}") from exc


def refuse_emptied(path: Path) -> None:
    """An archive file that exists but holds nothing (truncated to zero, or a crash in the
    instant between creating it and writing its first page) is never started afresh: a
    new archive over it would hide that everything it held is gone."""
    try:
        empty = path.is_file() and path.stat().st_size == 0
    except OSError:
        return  # opening it says what is wrong
    if empty:
        raise StoreUnavailable(
            f"the archive at {path} is an empty file (0 bytes): what it held is gone; restore "
            "it from a backup (jobkeeper will not start a new archive over it; move the file "
            "away to start afresh)"
        )


def writable(path: Path) -> bool:
    """Whether this process may write the archive and make files beside it (SQLite's WAL
    and shared-memory files); False on a read-only mount (EROFS) or without permission."""
    return os.access(path, os.W_OK) and os.access(path.parent, os.W_OK | os.X_OK)


def connect_read_only(path: Path) -> sqlite3.Connection:
    """A connection that only reads and creates no file beside the archive. With a WAL
    file that holds frames (a writer elsewhere, or one that died), SQLite reads through it (mode=ro;
    sqlite.org/wal.html#readonly); with none (or an empty one), the file holds everything and is opened
    ``immutable``, so SQLite neither locks it nor makes a shared-memory file."""
    wal = path.with_name(path.name + "-wal")
    try:
        frames = wal.stat().st_size > 0
    except OSError:
        frames = False
    query = "mode=ro" if frames else "mode=ro&immutable=1"
    uri = f"{path.resolve().as_uri()}?{query}"
    conn = sqlite3.connect(
        uri, uri=True, timeout=0.05, isolation_level=None, check_same_thread=False
    )
    conn.execute("PRAGMA query_only=ON")
    return conn


__all__ = [
    "BUSY_DEADLINE_SECONDS",
    "connect_read_only",
    "disk_refused",
    "fault_of",
    "full_disk_shm",
    "is_busy",
    "map_errors",
    "patiently",
    "refuse_emptied",
    "writable",
]
