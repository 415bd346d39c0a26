"""``jobkeeper serve``: the read-only web view over real HTTP on 127.0.0.1 (httpx as the
client). Its JSON mirrors the command line's ``--json`` exactly; it answers only GET and
HEAD (RFC 9110 §15.5.6: 405 with an Allow header); a token, when set, guards every
request; nothing a user typed is ever markup."""

from __future__ import annotations

import json
import os
from pathlib import Path

import httpx
import pytest

from jobkeeper import Keeper
from jobkeeper.cli import main
from jobkeeper.web.app import CSP
from jobkeeper.web.server import BackgroundView
from tests.integration.helpers import circuit_text

HOSTILE = "<script>alert(1)</script>"


@pytest.fixture(scope="module")
def keep(tmp_path_factory: pytest.TempPathFactory) -> Path:
    keep = tmp_path_factory.mktemp("view") / "keep"
    with Keeper.open(keep) as keeper:
        for i in range(6):
            keeper.run(circuit_text(0.1 * i), shots=200, seed=i, labels={"sweep-a"})
        keeper.run(circuit_text(2.0), shots=40, seed=1, labels={HOSTILE})
        keeper.submit(circuit_text(3.0), shots=10, labels={"later"})  # stays queued
        first, second = keeper.jobs(state="done")[:2]
        keeper.compare(first, second)
    return keep


@pytest.fixture(scope="module")
def view(keep: Path):  # type: ignore[no-untyped-def]
    with Keeper.open(keep, create=False) as keeper, BackgroundView(keeper) as running:
        yield running


def cli_json(capsys: pytest.CaptureFixture[str], *args: str) -> object:
    capsys.readouterr()
    assert main([*args, "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_api_jobs_mirrors_the_command_line(
    view: BackgroundView, keep: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    listed = cli_json(capsys, "jobs", "--keep", str(keep))
    served = httpx.get(view.url + "/api/jobs").json()
    assert isinstance(listed, list)
    # The same rows, key for key; the view lists newest first, the command oldest first.
    assert sorted(served, key=lambda r: r["id"]) == sorted(listed, key=lambda r: r["id"])
    shown = cli_json(capsys, "show", served[-1]["id"], "--keep", str(keep))
    assert httpx.get(f"{view.url}/api/jobs/{served[-1]['id']}").json() == shown


def test_the_job_list_pages_by_cursor_and_filters(view: BackgroundView, keep: Path) -> None:
    with Keeper.open(keep, create=False) as keeper:
        newest_first = [job.id for job in sorted(
            keeper.jobs(), key=lambda j: (j.record.created_at, j.id), reverse=True)]  # fmt: skip
    seen: list[str] = []
    url: str | None = view.url + "/api/jobs?limit=3"
    for _ in range(10):  # bounded: 8 jobs at 3 a page is 3 pages
        assert url is not None
        response = httpx.get(url)
        seen += [row["id"] for row in response.json()]
        link = response.headers.get("link")
        url = None if link is None else view.url + link.split(">")[0].lstrip("<")
        if url is None:
            break
    assert seen == newest_first
    labelled = httpx.get(view.url + "/api/jobs", params={"label": "sweep-a"}).json()
    assert len(labelled) == 6 and all(row["labels"] == ["sweep-a"] for row in labelled)
    queued = httpx.get(view.url + "/api/jobs", params={"state": "queued"}).json()
    assert [row["labels"] for row in queued] == [["later"]]
    assert httpx.get(view.url + "/api/jobs", params={"backend": "nowhere"}).json() == []
    assert httpx.get(view.url + "/api/jobs", params={"to": "2000-01-01"}).json() == []
    page = httpx.get(view.url + "/jobs", params={"label": "sweep-a", "state": "done"})
    assert "6 jobs match" in page.text
    assert httpx.get(view.url + "/jobs", params={"state": "lost"}).status_code == 400
    assert httpx.get(view.url + "/jobs", params={"after": "x~zz"}).status_code == 400


def test_only_get_and_head_are_answered(view: BackgroundView) -> None:
    for method in ("POST", "PUT", "DELETE", "PATCH", "OPTIONS"):
        response = httpx.request(method, view.url + "/jobs")
        assert response.status_code == 405, method
        assert response.headers["allow"] == "GET, HEAD"
    head = httpx.head(view.url + "/")
    assert head.status_code == 200 and head.content == b""


def test_every_answer_carries_the_policy(view: BackgroundView) -> None:
    for path in ("/", "/jobs", "/log", "/api/overview", "/static/style.css", "/jobs/fff"):
        response = httpx.get(view.url + path)
        assert response.headers["content-security-policy"] == CSP
        assert response.headers["x-content-type-options"] == "nosniff"
    assert "default-src 'none'" in CSP and "script-src" not in CSP


def test_a_hostile_label_is_text(view: BackgroundView) -> None:
    for path in ("/", "/jobs", "/jobs?label=" + HOSTILE):
        page = httpx.get(view.url + path).text
        assert HOSTILE not in page
        assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page


def test_a_foreign_host_name_is_refused_on_loopback(view: BackgroundView) -> None:
    # A page elsewhere that points its own name at 127.0.0.1 must not read the view.
    response = httpx.get(view.url + "/", headers={"Host": "attacker.example"})
    assert response.status_code == 421


def test_the_token_guards_every_request_and_is_never_shown(keep: Path) -> None:
    token = "view-token-6f1c2a"  # an invented secret for this test
    with Keeper.open(keep, create=False) as keeper, BackgroundView(keeper, token=token) as view:
        assert httpx.get(view.url + "/").status_code == 401
        assert httpx.get(view.url + "/api/jobs").status_code == 401
        wrong = httpx.get(view.url + "/", headers={"Authorization": "Bearer nope"})
        assert wrong.status_code == 401
        good = httpx.get(view.url + "/api/jobs", headers={"Authorization": f"Bearer {token}"})
        assert good.status_code == 200
        # Opening a page with ?token= sets a cookie and takes the token out of the address.
        client = httpx.Client(base_url=view.url)
        first = client.get("/jobs", params={"token": token, "state": "done"})
        assert first.status_code == 303 and first.headers["location"] == "/jobs?state=done"
        followed = client.get("/jobs?state=done")
        assert followed.status_code == 200 and token not in followed.text
        for path in ("/", "/log", "/log/verify", "/api/overview"):
            assert token not in client.get(path).text
        assert client.post("/jobs").status_code == 405
        client.close()


def test_a_reachable_address_without_a_token_is_refused_before_binding(
    keep: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    assert main(["serve", "--host", "0.0.0.0", "--port", "1", "--keep", str(keep)]) == 2
    assert "--token-env" in capsys.readouterr().err
    monkeypatch.delenv("JOBKEEPER_TEST_VIEW_TOKEN", raising=False)
    args = ["serve", "--host", "0.0.0.0", "--token-env", "JOBKEEPER_TEST_VIEW_TOKEN"]
    assert main([*args, "--keep", str(keep)]) == 2
    assert "not set" in capsys.readouterr().err
    assert "JOBKEEPER_TEST_VIEW_TOKEN" not in os.environ


def test_pages_of_records_that_do_not_exist_say_so(view: BackgroundView) -> None:
    assert httpx.get(view.url + "/jobs/0123456789abcdef").status_code == 404
    assert httpx.get(view.url + "/api/jobs/0123456789abcdef").json()["error"]
    assert httpx.get(view.url + "/comparisons/0123").status_code == 404
    assert httpx.get(view.url + "/nowhere").status_code == 404


def test_the_overview_shows_each_budget(tmp_path: Path) -> None:
    keep = tmp_path / "keep"
    keep.mkdir()
    (keep / "config.toml").write_text(
        '[budget]\ntotal = 100.0\n[budget.labels]\n"<b>x</b>" = 5.0\n'
    )
    with Keeper.open(keep) as keeper:
        keeper.run(circuit_text(0.0), shots=100, seed=1, labels={"<b>x</b>"})
        with BackgroundView(keeper) as view:
            overview = httpx.get(view.url + "/api/overview").json()
            page = httpx.get(view.url + "/").text
    assert overview["budgets"] == [
        {"label": None, "spent": 0.0, "cap": 100.0},
        {"label": "<b>x</b>", "spent": 0.0, "cap": 5.0},
    ]
    assert overview["states"]["done"] == 1 and overview["total"] == 1
    assert "<meter" in page and "&lt;b&gt;x&lt;/b&gt;" in page and "<b>x</b>" not in page
