"""A team on one PostgreSQL archive: every worker keep lists its key in the database, but
a verifying keep trusts only the keys it was told to trust (verifier-held trust roots, as
in DSSE v1 and in-toto; the team, its workers and its keyring file are invented)."""

from __future__ import annotations

import json
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.cli import main
from tests.conftest import require_postgres
from tests.integration.helpers import circuit_text
from tests.postgres_fixtures import fresh_schema

pytestmark = [pytest.mark.postgres]


@pytest.fixture
def pg_url() -> Iterator[str]:
    url = require_postgres()
    with fresh_schema(url, f"t_{uuid.uuid4().hex[:12]}") as bound:
        yield bound


def _fp(keep: Path) -> str:
    return (keep / "keys" / "active").read_text().strip()


def _verify(capsys: pytest.CaptureFixture[str], keep: Path, url: str) -> tuple[int, dict]:
    capsys.readouterr()
    code = main(["verify", "--all", "--keep", str(keep), "--store", url, "--json"])
    return code, json.loads(capsys.readouterr().out)


def test_verification_passes_only_once_both_worker_keys_are_trusted(
    tmp_path: Path, pg_url: str, capsys: pytest.CaptureFixture[str]
) -> None:
    workers = [tmp_path / "worker-a", tmp_path / "worker-b"]
    for n, keep in enumerate(workers):
        with Keeper.open(keep, store=pg_url) as keeper:
            keeper.run_many([circuit_text(0.1 * n + 0.01 * i) for i in range(3)], shots=32,
                            seed=n)  # fmt: skip
    verifier = tmp_path / "verifier"
    with Keeper.open(verifier, store=pg_url) as keeper:
        listed = set(keeper.store.public_keys())
    a, b = (_fp(keep) for keep in workers)
    assert {a, b, _fp(verifier)} == listed  # all three listed in the shared database
    code, report = _verify(capsys, verifier, pg_url)
    assert code == 1 and sorted(report["untrusted_signers"]) == sorted([a, b])
    # Worker A is trusted by hand; worker B through the team's shared keyring file.
    assert main(["trust", "add", a, "--name", "worker-a", "--keep", str(verifier),
                 "--store", pg_url]) == 0  # fmt: skip
    code, report = _verify(capsys, verifier, pg_url)
    assert code == 1 and report["untrusted_signers"] == [b]
    capsys.readouterr()
    assert main(["trust", "list", "--keep", str(workers[1]), "--store", pg_url, "--json"]) == 0
    team = tmp_path / "team-keys.json"
    team.write_text(capsys.readouterr().out)
    assert main(["trust", "import", str(team), "--keep", str(verifier), "--store", pg_url]) == 0
    code, report = _verify(capsys, verifier, pg_url)
    assert code == 0 and report["ok"] and report["checked"] == 6, report
    assert report["signer_trusted"] is True
