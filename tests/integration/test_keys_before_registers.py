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
from tests.integration.helpers import jk

DATA = Path(__file__).parent / "data" / "keys-before-registers"
FINGERPRINT = "d4b95edc80e6086b25c612fd5d040a1c2f26dabe6ce78f699031e86c6c998fb8"
# The job ids and counts the fixture's maker printed when it made the keep.
THREE_REGISTER_JOBS = {
    "06526856f1f946f4b2ae9843725327e8": {"0 01": 210, "1 01": 190},
    "fc7215d53edc4e64bf62273815712407": {"0 01": 191, "1 01": 209},
}
BELL_JOB = ("a102115d71cb4452a1d0c5945002da82", {"00": 104, "11": 96})


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


def test_old_keys_keep_their_meaning_beside_new_ones(
    keep: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # The fixture's circuit (make_keep.py): a = 01 always, b a coin. Its old keys "0 01"
    # and "1 01" are b, a; written today they are "01|0" and "01|1" (worked out by hand).
    job_id = next(iter(THREE_REGISTER_JOBS))
    with Keeper.open(keep, create=False) as keeper:
        old = keeper.job(job_id)
        layout = old.registers
        assert layout.first and layout.registers == (("c0", 2), ("c1", 1))
        assert layout.split("1 01") == ("01", "1")
        rerun = keeper.rerun(job_id)  # the same deterministic setup: identical counts
        assert rerun.record.verdict == "identical"
        again = keeper.job(rerun.rerun_job or "")
        assert set(again.counts) == {"01|0", "01|1"}
        old_counts = THREE_REGISTER_JOBS[job_id]
        assert again.counts == {"01|0": old_counts["0 01"], "01|1": old_counts["1 01"]}
        assert keeper.compare(job_id, ideal=True).record.verdict == "consistent"
        assert keeper.verify().ok
    code, out, err = jk(capsys, "--keep", str(keep), "counts", job_id, "--format", "csv")
    assert code == 0, err
    assert out.splitlines() == ["outcome,reg_c0,reg_c1,count", "0 01,01,0,210", "1 01,01,1,190"]
