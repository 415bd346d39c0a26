"""Regenerate the README's screenshots of the web view (``make screenshots``): an invented
keep (a Bell pair, a five-qubit GHZ state, a rerun and a comparison, labelled as the demo
scenario they are), served on 127.0.0.1, photographed by the system's Chromium through
Playwright, written to docs/.

Needs Debian's ``chromium`` package; nothing is downloaded.
"""

from __future__ import annotations

import os
import shutil
import sys
import tempfile
from pathlib import Path

from jobkeeper import Keeper
from jobkeeper.web.server import BackgroundView

DOCS = Path(__file__).resolve().parent
REPO = Path(__file__).resolve().parent.parent
CIRCUITS = Path("examples/circuits")  # relative: the page shows the source as given


def main() -> int:
    chromium = shutil.which("chromium")
    if chromium is None:
        print("no chromium on PATH: apt-get install chromium", file=sys.stderr)
        return 2
    from playwright.sync_api import sync_playwright

    DOCS.mkdir(exist_ok=True)
    os.chdir(REPO)
    with tempfile.TemporaryDirectory() as tmp, Keeper.open(Path(tmp) / "demo-keep") as keeper:
        # An invented scenario: the runs behind a paper's "figure 3".
        bell = keeper.run(CIRCUITS / "bell.qasm", shots=2000, seed=7, labels={"fig3"})
        keeper.run(CIRCUITS / "ghz5.qasm", shots=2000, seed=8, labels={"fig3"})
        keeper.rerun(bell, seed=9)
        keeper.compare(bell, ideal=True)
        with BackgroundView(keeper) as view, sync_playwright() as playwright:
            browser = playwright.chromium.launch(executable_path=chromium,
                                                 args=["--no-sandbox"])  # fmt: skip
            page = browser.new_page(viewport={"width": 1100, "height": 820})
            page.goto(view.url + "/")
            page.screenshot(path=str(DOCS / "web-overview.png"))
            page.goto(f"{view.url}/jobs/{bell.id}")
            page.screenshot(path=str(DOCS / "web-job.png"))
            browser.close()
    print(f"wrote {DOCS / 'web-overview.png'} and {DOCS / 'web-job.png'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
