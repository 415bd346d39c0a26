"""``jobkeeper plot``: figures of a job and of a comparison, read back from the drawing.

Bar heights are read from the SVG's geometry against its own axis ticks (tests/
svg_geometry.py), never from metadata, and compared with the counts the archive holds.
The metadata must name the record and the SHA-256 of the exact bytes ``jobkeeper bundle
ID`` writes (SHA-256 by hashlib, the standard library's FIPS 180-4 implementation)."""

from __future__ import annotations

import hashlib
import json
import re
from pathlib import Path

import pytest
from PIL import Image

from jobkeeper import Keeper
from jobkeeper.cli import main
from jobkeeper.web.figures import MAX_BARS, FigureSource, Histogram, histogram_figure, render
from tests import svg_geometry as geo
from tests.integration.helpers import circuit_text

BELL = circuit_text(0.0)


@pytest.fixture
def keep(tmp_path: Path) -> Path:
    keep = tmp_path / "keep"
    with Keeper.open(keep) as keeper:
        keeper.run(BELL, shots=1000, seed=7)
        keeper.run(circuit_text(0.7, qubits=3), shots=400, seed=3)
    return keep


def ids(keep: Path) -> list[str]:
    with Keeper.open(keep, create=False) as keeper:
        return [job.id for job in keeper.jobs()]


def counts_of(keep: Path, job_id: str) -> dict[str, int]:
    with Keeper.open(keep, create=False) as keeper:
        return keeper.job(job_id).counts


def bundle_sha256(keep: Path, job_id: str, path: Path) -> str:
    assert main(["bundle", job_id, "-o", str(path), "--keep", str(keep)]) == 0
    return "sha256:" + hashlib.sha256(path.read_bytes()).hexdigest()


def test_a_job_histogram_draws_its_archived_counts(keep: Path, tmp_path: Path) -> None:
    for job_id in ids(keep):
        out = tmp_path / f"{job_id}.svg"
        assert main(["plot", job_id[:10], "-o", str(out), "--keep", str(keep)]) == 0
        root = geo.parse(out.read_bytes())
        drawn = geo.bar_values(root)
        counts = counts_of(keep, job_id)
        assert set(drawn) == set(counts)
        for outcome, value in drawn.items():
            # SVG coordinates are written with 6 decimals: half a unit in the last place of
            # a ~150-unit axis is far below one count at these scales (common practice).
            assert value == pytest.approx(counts[outcome], abs=0.01)
        labels = ["".join(t.itertext()) for t in root.iter(f"{geo.SVG}text")]
        assert any(label.startswith("Counts (shots, of") for label in labels)
        assert any(label.startswith("Outcome") for label in labels)


def test_the_metadata_names_the_record_and_its_bundle_digest(keep: Path, tmp_path: Path) -> None:
    job_id = ids(keep)[0]
    first, second = tmp_path / "b1.json", tmp_path / "b2.json"
    digest = bundle_sha256(keep, job_id, first)
    # Bundles are deterministic: the same record at the same log size, the same bytes.
    assert bundle_sha256(keep, job_id, second) == digest
    assert first.read_bytes() == second.read_bytes()

    svg = tmp_path / "f.svg"
    assert main(["plot", job_id, "-o", str(svg), "--caption", "--keep", str(keep)]) == 0
    root = geo.parse(svg.read_bytes())
    dc = "{http://purl.org/dc/elements/1.1/}"
    assert next(root.iter(f"{dc}identifier")).text == f"jobkeeper:job:{job_id}"
    assert next(root.iter(f"{dc}source")).text == digest
    caption = "".join(geo.by_id(root, "note").itertext())
    assert job_id in caption and digest in caption

    png = tmp_path / "f.png"
    assert main(["plot", job_id, "-o", str(png), "--keep", str(keep)]) == 0
    with Image.open(png) as image:
        text = image.text  # type: ignore[attr-defined]
    assert text["jobkeeper-record"] == job_id and text["jobkeeper-bundle-sha256"] == digest

    pdf = tmp_path / "f.pdf"
    assert main(["plot", job_id, "-o", str(pdf), "--keep", str(keep)]) == 0
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF-") and digest.encode() in data and job_id.encode() in data


def test_the_same_record_draws_the_same_bytes(keep: Path, tmp_path: Path) -> None:
    job_id = ids(keep)[0]
    a, b = tmp_path / "a.svg", tmp_path / "b.svg"
    assert main(["plot", job_id, "-o", str(a), "--keep", str(keep)]) == 0
    assert main(["plot", job_id, "-o", str(b), "--keep", str(keep)]) == 0
    assert a.read_bytes() == b.read_bytes()


def test_a_comparison_draws_both_jobs_on_one_scale(
    keep: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    with Keeper.open(keep, create=False) as keeper:
        again = keeper.run(BELL, shots=500, seed=11)
        first = keeper.jobs()[0]
        judgement = keeper.compare(first, again)
    out = tmp_path / "c.svg"
    code = main(["plot", judgement.record.id, "-o", str(out), "--json", "--keep", str(keep)])
    assert code == 0
    printed = json.loads(capsys.readouterr().out)
    assert printed["kind"] == "comparison" and printed["id"] == judgement.record.id
    root = geo.parse(out.read_bytes())
    for tag, job_id, shots in (("a", first.id, 1000), ("b", again.id, 500)):
        drawn = geo.bar_values(root, tag)
        counts = counts_of(keep, job_id)
        for outcome, value in drawn.items():
            assert value == pytest.approx(counts.get(outcome, 0) / shots, abs=1e-4)
    # One y scale: the tick labels of both panels sit at the same heights.
    left = [(t.position, t.label) for t in geo.ticks(root, "yaxis-a")]
    right = [(t.position, t.label) for t in geo.ticks(root, "yaxis-b")]
    assert left == right


def test_plot_refuses_what_it_cannot_do(
    keep: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    job_id = ids(keep)[0]
    out = tmp_path / "f.svg"
    assert main(["plot", job_id, "-o", str(tmp_path / "f.txt"), "--keep", str(keep)]) == 2
    assert main(["plot", "fffffff", "-o", str(out), "--keep", str(keep)]) == 2
    assert main(["plot", job_id, "-o", str(out), "--keep", str(keep)]) == 0
    before = out.read_bytes()
    assert main(["plot", job_id, "-o", str(out), "--caption", "--keep", str(keep)]) == 2
    assert out.read_bytes() == before
    assert "--force" in capsys.readouterr().err
    assert main(["plot", job_id, "-o", str(out), "--caption", "--force", "--keep", str(keep)]) == 0
    assert out.read_bytes() != before
    inside = keep / "figure.svg"
    assert main(["plot", job_id, "-o", str(inside), "--force", "--keep", str(keep)]) == 2
    assert not inside.exists()


def test_many_outcomes_show_the_most_frequent_and_say_so() -> None:
    # An invented table of 40 outcomes; the figure keeps the MAX_BARS most frequent.
    values = {format(i, "06b"): 100 + i for i in range(40)}
    source = FigureSource("job", "0" * 32, "sha256:" + "0" * 64)
    root = geo.parse(render(histogram_figure(Histogram("t", values, 4780), source), "svg", source))
    drawn = geo.bar_values(root)
    assert len(drawn) == MAX_BARS
    assert set(drawn) == {format(i, "06b") for i in range(40 - MAX_BARS, 40)}
    note = "".join(geo.by_id(root, "note").itertext())
    assert re.search(r"8 more not drawn", note)


def test_text_in_a_figure_is_never_markup_or_math() -> None:
    hostile = "<script>alert(1)</script> $x^2$"
    source = FigureSource("job", "0" * 32, "sha256:" + "0" * 64)
    svg = render(histogram_figure(Histogram(hostile, {hostile: 3}, 3), source), "svg", source)
    root = geo.parse(svg)
    assert not list(root.iter(f"{geo.SVG}script"))
    texts = ["".join(t.itertext()) for t in root.iter(f"{geo.SVG}text")]
    assert hostile in texts  # the title, as typed: no math rendering, no markup
