"""A keep and a bundle written before count keys named their registers (see
data/README.md: ``keys-before-registers/``) still verify, with their counts read as
they were signed: the register layout of that version (last declared register leftmost,
a space between registers) stays the meaning of its predicate version."""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.cli import main

DATA = Path(__file__).parent / "data" / "keys-before-registers"
FINGERPRINT = "d4b95edc80e6086b25c612fd5d040a1c2f26dabe6ce78f699031e86c6c998fb8"
# The job ids and counts the fixture's maker printed when it made the keep.
THREE_REGISTER_JOBS = {
    "06526856f1f946f4b2ae9843725327e8": {"0 01": 210, "1 01": 190},
    "fc7215d53edc4e64bf62273815712407": {"0 01": 191, "1 01": 209},
}
BELL_JOB = ("a102115d71cb4452a1d0c5945002da82", {"00": 104, "11": 96})


def jk(capsys: pytest.CaptureFixture[str], *args: str) -> tuple[int, str, str]:
    capsys.readouterr()
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def keep(tmp_path: Path) -> Path:
    copy = tmp_path / "keep"
    shutil.copytree(DATA / "keep", copy)
    os.chmod(copy / "keys", 0o700)  # git keeps no modes: the key must be private again
    for key in (copy / "keys").glob("*.key"):
        os.chmod(key, 0o600)
    return copy


def test_the_keep_verifies_and_reads_its_counts_as_signed(
    keep: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    code, out, err = jk(capsys, "--keep", str(keep), "verify", "--all", "--json")
    assert code == 0, out + err
    assert json.loads(out)["ok"] is True
    with Keeper.open(keep, create=False) as keeper:
        assert keeper.verify().ok
        for job_id, counts in THREE_REGISTER_JOBS.items():
            assert keeper.job(job_id).counts == counts
        assert keeper.job(BELL_JOB[0]).counts == BELL_JOB[1]
        assert len(keeper.comparisons()) == 2


def test_the_bundle_verifies_offline_in_another_keep(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    other = tmp_path / "other"
    code, out, err = jk(capsys, "--keep", str(other), "init")
    assert code == 0, out + err
    bundle = str(DATA / "fig4.bundle")
    args = ("--keep", str(other), "verify", bundle)
    code, out, err = jk(capsys, *args)
    assert code == 1, out + err  # the fixture's signer is not trusted here yet
    code, out, err = jk(capsys, *args, "--key", FINGERPRINT, "--json")
    assert code == 0, out + err
    assert json.loads(out)["ok"] is True
