"""The web view in a real browser (the system's Chromium, tests/browser.py): follow links
from the overview to a job and a comparison, check the counts and the drawn bars against
the archive, and check that no request leaves 127.0.0.1, that a hostile label stays text
(no dialog opens, no script runs), and that a POST gets 405. Screenshots are saved under
the test's temporary folder."""

from __future__ import annotations

from pathlib import Path
from typing import Any
from urllib.parse import urlparse

import pytest

from jobkeeper import Keeper
from jobkeeper.web.server import BackgroundView
from tests import svg_geometry as geo
from tests.browser import browser  # noqa: F401  (fixture)
from tests.integration.helpers import circuit_text

HOSTILE = "<script>alert(1)</script>"


@pytest.fixture
def keep(tmp_path: Path) -> Path:
    keep = tmp_path / "keep"
    with Keeper.open(keep) as keeper:
        keeper.run(circuit_text(0.0), shots=1000, seed=7, labels={"bell"})
        keeper.run(circuit_text(0.8, qubits=3), shots=500, seed=2, labels={HOSTILE})
        first, second = keeper.jobs()
        keeper.compare(first, second)
    return keep


class Watch:
    """Every request the page makes, and any dialog a script would open."""

    def __init__(self, context: Any) -> None:
        self.hosts: list[str] = []
        self.dialogs: list[str] = []
        context.on(
            "request", lambda request: self.hosts.append(urlparse(request.url).hostname or "")
        )
        # Anything not for 127.0.0.1 is refused outright (and recorded above all the same).
        context.route("**/*", lambda route: route.continue_() if urlparse(
            route.request.url).hostname == "127.0.0.1" else route.abort())  # fmt: skip

    def page(self, context: Any) -> Any:
        page = context.new_page()
        page.on("dialog", lambda dialog: (self.dialogs.append(dialog.message), dialog.dismiss()))
        return page


def test_overview_to_job_to_comparison(browser: Any, keep: Path, tmp_path: Path) -> None:  # noqa: F811
    with Keeper.open(keep, create=False) as keeper, BackgroundView(keeper) as view:
        archive = {job.id: job.counts for job in keeper.jobs()}
        context = browser.new_context(viewport={"width": 1200, "height": 900})
        watch = Watch(context)
        page = watch.page(context)
        page.goto(view.url + "/")
        page.screenshot(path=str(tmp_path / "overview.png"), full_page=True)
        assert "jobs by state" in page.inner_text("#states").lower()
        assert page.inner_text("#states").count("2") >= 1

        # The hostile label is shown as the text it is.
        assert HOSTILE in page.inner_text("#recent")

        # Follow the link of the Bell job from the recent activity.
        bell_id = next(i for i, c in archive.items() if set(c) == {"00", "11"})
        page.click(f"#recent a[href='/jobs/{bell_id}']")
        page.wait_for_url(f"**/jobs/{bell_id}")
        page.screenshot(path=str(tmp_path / "job.png"), full_page=True)
        rows = page.locator("#counts tr").all_inner_texts()[1:]
        shown = {line.split("\t")[0]: int(line.split("\t")[1]) for line in rows}
        assert shown == archive[bell_id]
        assert "Verified now" in page.inner_text("#verification")
        svg = page.inner_html("#histogram")
        svg = svg[svg.index("<svg") : svg.index("</svg>") + 6]
        drawn = geo.bar_values(geo.parse(svg), prefix="job-")
        assert drawn == pytest.approx({k: float(v) for k, v in archive[bell_id].items()}, abs=0.01)

        # On to the comparison, and its two panels.
        page.click("a[href^='/comparisons/']")
        page.wait_for_url("**/comparisons/*")
        page.screenshot(path=str(tmp_path / "comparison.png"), full_page=True)
        svg = page.inner_html("#comparison-figure")
        root = geo.parse(svg[svg.index("<svg") : svg.index("</svg>") + 6])
        for tag in ("a", "b"):
            assert geo.bar_values(root, tag, prefix="cmp-")

        # The hostile label's own job page, and a filtered list.
        page.goto(view.url + "/jobs?label=" + HOSTILE)
        assert HOSTILE in page.inner_text("#job-list")
        page.click("#job-list a.id")
        assert HOSTILE in page.inner_text("#summary")

        # Verify-now from the log page.
        page.goto(view.url + "/log")
        page.click("#verify-now")
        page.wait_for_url("**/log/verify")
        assert "Verified now" in page.inner_text("#verification")
        assert "jobkeeper verify --all" in page.inner_text("main")

        response = context.request.post(view.url + "/jobs")
        assert response.status == 405
        context.close()

    assert watch.dialogs == []
    assert watch.hosts and set(watch.hosts) == {"127.0.0.1"}
    assert sorted(p.name for p in tmp_path.glob("*.png")) == [
        "comparison.png", "job.png", "overview.png"]  # fmt: skip
