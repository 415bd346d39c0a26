"""Children die with their parent: a real `jobkeeper worker --slots 2` simulating real
jobs in its process pool is SIGKILLed ten times (and started again each time). After
each kill, every pool process it left must be gone within 5 s; none may be left behind
holding the archive open. At the end every job is done and archived exactly once and
the log verifies (a simulation cut short by a kill is simply run again: a local job
leaves no trace outside the keep until it is archived)."""

from __future__ import annotations

import os
import random
import signal
import subprocess
import time
from functools import partial
from pathlib import Path

import pytest

from jobkeeper import Keeper
from tests.integration.helpers import jobkeeper_cmd, sigkill, start_worker, wait_for

JOBS = 40
KILLS = 10
QUBITS = 16  # above the worker's small-circuit bound: simulated in its process pool
FAST_LEASE = ("--lease", "1.5", "--heartbeat", "0.3", "--lease-check", "0.3")
ORPHAN_DEADLINE = 5.0


def _circuit(index: int) -> str:
    """An invented 16-qubit layered circuit, distinct per index, slow enough to be cut."""
    lines = ["OPENQASM 2.0;", 'include "qelib1.inc";', f"qreg q[{QUBITS}];", f"creg c[{QUBITS}];"]
    for layer in range(24):
        lines += [f"rx({0.001 * index + 0.1 * layer + 0.01 * i!r}) q[{i}];" for i in range(QUBITS)]
        lines += [f"cx q[{i}],q[{i + 1}];" for i in range(QUBITS - 1)]
    return "\n".join([*lines, "measure q -> c;"]) + "\n"


def _processes_of(keep: Path) -> list[int]:
    """Live processes started for this keep: the worker and its pool (forked, they carry
    the worker's command line, which names the keep)."""
    needle = str(keep).encode()
    found = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            cmdline = (entry / "cmdline").read_bytes()
            state = (entry / "stat").read_text().rsplit(")", 1)[1].split()[0]
        except OSError:
            continue
        if needle in cmdline and state != "Z":
            found.append(int(entry.name))
    return found


def _pool_running(keep: Path, worker: subprocess.Popen[bytes]) -> bool:
    return len(_processes_of(keep)) >= 3 or worker.poll() is not None


@pytest.mark.slow
@pytest.mark.skipif(not Path("/proc").is_dir(), reason="counts processes through /proc")
def test_pool_processes_end_with_a_sigkilled_worker(tmp_path: Path) -> None:
    keep = tmp_path / "keep"
    with Keeper.open(keep) as keeper:
        submitted = keeper.submit_many([_circuit(i) for i in range(JOBS)], shots=64)
        ids = {s.job.id for s in submitted}
    rng = random.Random(20261205)
    log = tmp_path / "worker.log"
    orphans = kills = 0
    for _ in range(KILLS):  # bounded: ten rounds, each within a few seconds
        worker = start_worker(keep, "--slots", "2", *FAST_LEASE, stderr_path=log)
        # until its pool runs (the worker plus two pool processes), or 20 s at most
        wait_for(partial(_pool_running, keep, worker), 20.0)
        time.sleep(rng.uniform(0.2, 1.5))
        if not sigkill(worker):
            break  # it drained everything before the kill
        kills += 1
        wait_for(lambda: not _processes_of(keep), ORPHAN_DEADLINE)
        left = _processes_of(keep)
        orphans += len(left)
        for pid in left:  # clean up, so one failure does not spoil the next rounds
            os.kill(pid, signal.SIGKILL)
    assert orphans == 0, f"{orphans} pool processes outlived their worker by {ORPHAN_DEADLINE} s"
    assert kills >= 5, "the workers finished before most kills: make the jobs slower"
    final = subprocess.run(
        jobkeeper_cmd("worker", "--once", "--keep", str(keep), *FAST_LEASE),
        capture_output=True, timeout=240, check=False,
    )  # fmt: skip
    assert final.returncode == 0, final.stderr.decode()
    with Keeper.open(keep) as keeper:
        jobs = keeper.jobs()
        assert {job.id for job in jobs} == ids  # none lost
        assert {job.state for job in jobs} == {"done"}
        archived = [entry.job_id for entry in keeper.store.log_entries()]
        assert sorted(archived) == sorted(ids)  # each archived once: none twice
        report = keeper.verify()
        assert report.ok, report.problems
