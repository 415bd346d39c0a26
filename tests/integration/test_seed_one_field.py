"""The seed has one owner: resolved once at submission, it is the integer the backend is
given, the one ``run`` prints, the one ``show --json`` gives and the one the signed
manifest holds — also when the backend never says which seed it used (a fake device that
does not echo it, and the REST adapter against the loopback device over real HTTP)."""

from __future__ import annotations

import base64
import json
import re
from collections.abc import Iterator
from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.cli import main
from jobkeeper.loopback.testing import running_device
from jobkeeper.spec import resolve_seed

REPO = Path(__file__).resolve().parents[2]
BELL = REPO / "examples" / "circuits" / "bell.qasm"


def jk(capsys: pytest.CaptureFixture[str], *args: str) -> tuple[int, str]:
    code = main(list(args))
    out, err = capsys.readouterr()
    assert code == 0, err
    return code, out


@pytest.fixture(params=["quiet-fake", "rest-loopback"])
def keep(request: pytest.FixtureRequest, tmp_path: Path, monkeypatch) -> Iterator[Path]:
    keep = tmp_path / "keep"
    keep.mkdir()
    if request.param == "quiet-fake":
        (keep / "config.toml").write_text(
            "[backends.dev]\n"
            'adapter = "recording"\n'
            f'ledger_dir = "{tmp_path / "ledger"}"\n'
            "echo_seed = false\n"
        )
        yield keep
        return
    with running_device() as device:
        monkeypatch.setenv(device.token_env, device.token)
        lines = ["[retry]", "base = 0.05", "cap = 0.5", "", "[poll]", "first = 0.05",
                 "factor = 1.5", "cap = 0.2", "", "[backends.dev]"]  # fmt: skip
        lines += [f"{k} = {json.dumps(v)}" for k, v in device.backend_config().items()]
        (keep / "config.toml").write_text("\n".join(lines) + "\n")
        yield keep


def seeds_shown(capsys: pytest.CaptureFixture[str], keep: Path, *args: str) -> dict[str, object]:
    _, out = jk(capsys, "run", str(BELL), "-b", "dev", "--shots", "200", "--keep", str(keep),
                *args)  # fmt: skip
    match = re.search(r"^job (\w+) on dev, 200 shots, seed (\d+)$", out, re.MULTILINE)
    assert match, out
    _, shown = jk(capsys, "show", match.group(1), "--keep", str(keep), "--json")
    details = json.loads(shown)
    assert details["state"] == "done" and details["verification"]["ok"]
    # The DSSE envelope's payload is the in-toto Statement (DSSE spec, envelope.md).
    statement = json.loads(base64.b64decode(details["signed_envelope"]["payload"]))
    return {
        "printed": int(match.group(2)),
        "show": details["seed"],
        "manifest": int(statement["predicate"]["seed"]),
        "requested": details["requested_seed"],
        "id": details["id"],
    }


def test_a_given_seed_on_a_repeat_is_one_integer_everywhere(capsys, keep: Path) -> None:
    seeds = seeds_shown(capsys, keep, "--seed", "7", "--repeat", "1")
    assert seeds["printed"] == seeds["show"] == seeds["manifest"] == resolve_seed(7, 1)
    assert seeds["printed"] != 7 and seeds["requested"] == 7


def test_a_seed_chosen_by_jobkeeper_is_one_integer_everywhere(capsys, keep: Path) -> None:
    seeds = seeds_shown(capsys, keep)
    assert isinstance(seeds["show"], int) and 0 <= seeds["show"] < 2**63
    assert seeds["printed"] == seeds["show"] == seeds["manifest"]
    assert seeds["requested"] is None
    with Keeper.open(keep, create=False) as keeper:
        job = keeper.job(str(seeds["id"]))
        assert job.spec.seed == seeds["show"]
        assert keeper.manifest(job)["predicate"]["seed"] == str(job.spec.seed)
        # The chosen seed is not in the job key: asking again finds the same job.
        again = keeper.submit_many([BELL], backend="dev", shots=200)[0]
        assert again.deduplicated and again.job.id == job.id
