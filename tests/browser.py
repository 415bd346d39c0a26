"""The system's Chromium (Debian's ``chromium`` package), driven through Playwright's
Python client with ``executable_path``: no browser is downloaded. Tests that need it skip
with a reason where it is missing, and fail instead under ``CI=true`` (.ci/run installs
it)."""

from __future__ import annotations

import shutil
from collections.abc import Iterator
from typing import Any

import pytest

from tests.conftest import IN_CI


def chromium_path() -> str:
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    reason = "no chromium on PATH (apt-get install chromium)"
    if IN_CI:
        pytest.fail(f"CI=true but {reason}")
    pytest.skip(reason)


@pytest.fixture
def browser() -> Iterator[Any]:
    """A headless Chromium; each test opens its own context (cookies, network rules)."""
    path = chromium_path()
    from playwright.sync_api import sync_playwright

    with sync_playwright() as playwright:
        # --no-sandbox: CI runs as root, where Chromium refuses its sandbox.
        launched = playwright.chromium.launch(executable_path=path, args=["--no-sandbox"])
        try:
            yield launched
        finally:
            launched.close()
