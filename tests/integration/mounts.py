"""Real file systems for fault tests: a small tmpfs (a disk that fills up) and a read-only
bind mount. Mounting needs root with the right to mount; where that is missing the test
is skipped with the reason, and under CI=true (where the tests run as root) it fails."""

from __future__ import annotations

import contextlib
import os
import subprocess
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.conftest import IN_CI


def _mount(*args: str) -> None:
    done = subprocess.run(["mount", *args], capture_output=True, timeout=30, check=False)
    if done.returncode != 0:
        reason = f"cannot mount here ({done.stderr.decode(errors='replace').strip()})"
        if IN_CI:
            pytest.fail(f"CI=true but {reason}")
        pytest.skip(reason)


def _umount(path: Path) -> None:
    subprocess.run(["umount", "-l", str(path)], capture_output=True, timeout=30, check=False)


def _need_root() -> None:
    if os.geteuid() != 0:
        reason = "mounting a file system needs root"
        if IN_CI:
            pytest.fail(f"CI=true but {reason}")
        pytest.skip(reason)


@contextlib.contextmanager
def small_tmpfs(path: Path, size: str = "2m") -> Iterator[Path]:
    """A tmpfs of ``size`` at ``path`` (made), unmounted afterwards."""
    _need_root()
    path.mkdir(parents=True, exist_ok=True)
    _mount("-t", "tmpfs", "-o", f"size={size}", "tmpfs", str(path))
    try:
        yield path
    finally:
        _umount(path)


@contextlib.contextmanager
def read_only_view(source: Path, path: Path) -> Iterator[Path]:
    """``source`` seen read-only at ``path``: a read-only bind mount as root; else the
    directory and its files made unwritable by their modes (restored afterwards)."""
    path.mkdir(parents=True, exist_ok=True)
    if os.geteuid() != 0:
        modes = {p: p.stat().st_mode for p in [source, *source.rglob("*")]}
        for p in modes:
            p.chmod(modes[p] & ~0o222)
        try:
            yield source
        finally:
            for p, mode in modes.items():
                p.chmod(mode)
        return
    _mount("--bind", str(source), str(path))
    try:
        _mount("-o", "remount,ro,bind", str(path))
        yield path
    finally:
        _umount(path)
