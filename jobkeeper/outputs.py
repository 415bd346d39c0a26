"""Files a command writes for the user (a bundle, an exported key, an analysis export):
the one place that decides where they may go and how they are put there.

Rules, as careful archival tools keep them:

- an existing file is never replaced unless the caller says ``force``;
- nothing is written inside a keep directory, nor over the archive's database (or its
  ``-wal``/``-shm``/``-journal`` companions), even with ``force``: a keep belongs to
  jobkeeper alone, and ``bundle -o KEEP/archive.db`` must not destroy the archive;
- the file is written under a temporary name in the same directory, synced, and then put
  in place by one rename, so a reader never sees half a file and a failed write leaves
  the old file (or nothing) behind. Without ``force`` the last step is a hard link,
  which fails if a file of that name appeared meanwhile: no check-then-write race.

A refusal is a :class:`~jobkeeper.exceptions.ConfigError` (exit 2) with one line.
"""

from __future__ import annotations

import contextlib
import errno
import os
import secrets
from collections.abc import Iterable, Iterator
from pathlib import Path

from jobkeeper.exceptions import ConfigError

#: Files beside a SQLite database that are part of it.
_DB_COMPANIONS = ("", "-wal", "-shm", "-journal")


def guarded_paths(keep_dir: Path | None, database: Path | None = None) -> tuple[Path, ...]:
    """What no output may be written over or into: the keep directory and, when the
    archive is a SQLite file, that file and its companions (wherever it lives)."""
    guarded: list[Path] = []
    if keep_dir is not None:
        guarded.append(keep_dir.expanduser().resolve())
    if database is not None:
        base = database.expanduser().resolve()
        guarded.extend(base.with_name(base.name + suffix) for suffix in _DB_COMPANIONS)
    return tuple(guarded)


def check_output(path: Path, *, guarded: Iterable[Path] = (), force: bool = False) -> Path:
    """The absolute path an output will be written to, or ConfigError: a path inside or
    onto a guarded one (see :func:`guarded_paths`), a directory, an existing file without
    ``force``, or a parent directory that does not exist."""
    target = Path(path).expanduser().resolve()
    for place in guarded:
        if target == place or target.is_relative_to(place):
            raise ConfigError(
                f"refusing to write {path}: it is inside the keep or its archive "
                "(write it elsewhere; --force does not change this)"
            )
    if target.is_dir():
        raise ConfigError(f"{path} is a directory; give a file name")
    if (target.exists() or target.is_symlink()) and not force:
        raise ConfigError(f"{path} exists; pass --force to replace it")
    if not target.parent.is_dir():
        raise ConfigError(f"cannot write {path}: no directory {target.parent}")
    return target


@contextlib.contextmanager
def atomic_output(
    path: Path, *, guarded: Iterable[Path] = (), force: bool = False
) -> Iterator[Path]:
    """Yield a temporary path beside ``path`` to write the whole file to; when the block
    ends without an error, the file is synced and put in place (see the module
    docstring). On any error the temporary file is removed and the target is untouched."""
    target = check_output(path, guarded=guarded, force=force)
    partial = target.with_name(f".{target.name}.{secrets.token_hex(6)}.part")
    try:
        yield partial
        _sync(partial)
        _place(partial, target, shown=path, force=force)
    except OSError as exc:
        raise ConfigError(f"cannot write {path}: {exc.strerror or exc}") from exc
    finally:
        partial.unlink(missing_ok=True)


def write_output(
    path: Path, data: bytes | str, *, guarded: Iterable[Path] = (), force: bool = False
) -> Path:
    """Write ``data`` (text is UTF-8) to ``path`` by the rules of this module; returns the
    absolute path written."""
    raw = data.encode("utf-8") if isinstance(data, str) else data
    with atomic_output(path, guarded=guarded, force=force) as partial:
        partial.write_bytes(raw)
    return Path(path).expanduser().resolve()


def _sync(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _place(partial: Path, target: Path, *, shown: Path, force: bool) -> None:
    if force:
        os.replace(partial, target)
    else:
        try:
            os.link(partial, target)  # fails if the name was taken meanwhile
        except FileExistsError:
            raise ConfigError(f"{shown} exists; pass --force to replace it") from None
        except OSError as exc:
            # A file system without hard links: check once more and rename (a narrow race
            # that only such file systems have).
            if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EMLINK):
                raise
            if target.exists():
                raise ConfigError(f"{shown} exists; pass --force to replace it") from None
            os.replace(partial, target)
    with contextlib.suppress(OSError):  # the rename itself durable: sync the directory
        fd = os.open(target.parent, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
