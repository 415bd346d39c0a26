"""``jobkeeper report BUNDLE``: one self-contained HTML file for a referee. It must parse
without a single error in html5lib's strict mode (an implementation of the WHATWG HTML
parsing algorithm), open from file:// in a browser with networking off and fetch nothing,
show every job of the bundle with its counts, draw the bundle's counts (read back from
the SVG), name the signer's fingerprint and the command that repeats the checks, and say
so when the bundle does not verify."""

from __future__ import annotations

import base64
import json
from pathlib import Path
from typing import Any

import html5lib
import pytest

from jobkeeper import Keeper
from jobkeeper.cli import main
from tests import svg_geometry as geo
from tests.browser import browser  # noqa: F401  (fixture)
from tests.integration.helpers import circuit_text


@pytest.fixture
def made(tmp_path: Path) -> tuple[Path, Path, dict[str, dict[str, int]], str]:
    keep = tmp_path / "keep"
    with Keeper.open(keep) as keeper:
        keeper.run(circuit_text(0.0), shots=1000, seed=7)
        keeper.run(circuit_text(0.6, qubits=3), shots=300, seed=1)
        counts = {job.id: job.counts for job in keeper.jobs()}
        fingerprint = keeper.keys()[0].fingerprint
    bundle = tmp_path / "fig3.bundle.json"
    assert main(["bundle", *counts, "-o", str(bundle), "--keep", str(keep)]) == 0
    return keep, bundle, counts, fingerprint


def write(keep: Path, bundle: Path, out: Path, *extra: str) -> int:
    return main(["report", str(bundle), "-o", str(out), "--keep", str(keep), *extra])


def test_the_report_is_strict_html_and_shows_every_job(
    made: tuple[Path, Path, dict[str, dict[str, int]], str], tmp_path: Path
) -> None:
    keep, bundle, counts, fingerprint = made
    out = tmp_path / "report.html"
    assert write(keep, bundle, out) == 0
    html = out.read_text("utf-8")
    parser = html5lib.HTMLParser(strict=True, namespaceHTMLElements=False)
    parser.parse(html)  # raises on the first parse error
    assert parser.errors == []
    assert "<script" not in html and "http://" not in html.replace("http://www.w3.org", "")
    assert f'class="fingerprint">{fingerprint}<' in html
    assert f"jobkeeper verify {bundle.name} --key {fingerprint}" in html
    for job_id in counts:
        assert job_id in html
    # The figures draw the bundle's counts: read back from the geometry of each SVG.
    for n, entry in enumerate(json.loads(bundle.read_text())["entries"]):
        start = html.index(f'id="e{n}-figure_1"')
        svg = html[html.rindex("<svg", 0, start) : html.index("</svg>", start) + 6]
        drawn = geo.bar_values(geo.parse(svg), prefix=f"e{n}-")
        expected = counts[entry["record"]]
        assert drawn == pytest.approx({k: float(v) for k, v in expected.items()}, abs=0.01)


def test_it_refuses_to_overwrite_without_force(
    made: tuple[Path, Path, dict[str, dict[str, int]], str], tmp_path: Path,
    capsys: pytest.CaptureFixture[str],
) -> None:  # fmt: skip
    keep, bundle, _, _ = made
    out = tmp_path / "report.html"
    out.write_text("a referee's notes")
    assert write(keep, bundle, out) == 2
    assert out.read_text() == "a referee's notes"
    assert "--force" in capsys.readouterr().err
    assert write(keep, bundle, out, "--force") == 0
    assert out.read_text("utf-8").startswith("<!DOCTYPE html>")
    assert write(keep, bundle, keep / "report.html", "--force") == 2  # never into the keep


def test_a_tampered_bundle_gets_a_report_that_says_so(
    made: tuple[Path, Path, dict[str, dict[str, int]], str], tmp_path: Path
) -> None:
    keep, bundle, _, _ = made
    data = json.loads(bundle.read_text())
    envelope = data["entries"][0]["envelope"]
    statement = json.loads(base64.b64decode(envelope["payload"]))
    first = sorted(statement["predicate"]["counts"])[0]
    statement["predicate"]["counts"][first] += 1  # one shot moved: the signature breaks
    envelope["payload"] = base64.b64encode(json.dumps(statement).encode()).decode()
    forged = tmp_path / "forged.bundle.json"
    forged.write_text(json.dumps(data))
    out = tmp_path / "forged.html"
    assert write(keep, forged, out) == 1
    html = out.read_text("utf-8")
    assert "Verification found" in html and "see the problems listed above" in html
    # Pinned to a key that signed nothing: nothing can be trusted.
    other = tmp_path / "pinned.html"
    assert write(keep, bundle, other, "--key", "0" * 64) == 1
    assert "NOT TRUSTED" in other.read_text("utf-8")


def test_the_report_opens_offline_from_a_file(
    browser: Any,  # noqa: F811
    made: tuple[Path, Path, dict[str, dict[str, int]], str],
    tmp_path: Path,
) -> None:
    keep, bundle, counts, fingerprint = made
    out = tmp_path / "report.html"
    assert write(keep, bundle, out) == 0
    context = browser.new_context(offline=True, viewport={"width": 1100, "height": 900})
    requested: list[str] = []
    context.on("request", lambda request: requested.append(request.url))
    context.route("**/*", lambda route: route.continue_() if route.request.url.startswith(
        "file://") else route.abort())  # fmt: skip
    page = context.new_page()
    page.goto(out.as_uri())
    page.screenshot(path=str(tmp_path / "report.png"), full_page=True)
    text = page.inner_text("body")
    assert fingerprint in page.inner_text("#signers")
    for job_id, table in counts.items():
        section = page.inner_text(f"section.record:has(h2 span:text-is('{job_id}'))")
        for outcome, n in table.items():
            assert f"{outcome}\t{n}\t" in section
        assert job_id in text
    assert requested == [out.as_uri()]
    context.close()
