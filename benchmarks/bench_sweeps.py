"""A sweep from submission to archive, against bare SQLite and against the single-job path.

Measured in one run, in interleaved rounds (the disk's sync rate drifts with whatever
else the machine does, so each round's ratios use that round's own figures):

* bare: one SQLite transaction per point holding one insert and one update, WAL,
  synchronous=FULL, on the same disk (what any durable queue pays at least per job);
* sweep, batched: a 1,000-point sweep of a 5-qubit, 30-operation template (an invented
  angle scan: ``input float[64] theta``) at 200 shots, submitted with ``submit_sweep``
  (one transaction) and drained by one worker in this process, which claims the points
  in batches and seals each batch with one signed statement and one log entry;
* sweep, one job at a time: the same points, the same worker with ``batches=False``
  (each point sealed, signed and logged alone; finished jobs still share commits).

The clock runs from the submission to the last archived point; the worker has run a
job elsewhere first (the imports a first job costs), as a running daemon has. Targets:
batched ≥ 1.0 × bare, and ≥ 5 × the single-job path.
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

from jobkeeper import Keeper
from jobkeeper.circuit import load_template

TARGET_BARE = 1.0
TARGET_SINGLE = 5.0
SHOTS = 200

# Invented for the benchmark: 25 gates over 5 qubits and 5 measurements (30 operations).
TEMPLATE = """OPENQASM 3.0;
include "stdgates.inc";
input float[64] theta;
qubit[5] q;
bit[5] c;
h q[0]; h q[1]; h q[2]; h q[3]; h q[4];
rz(theta) q[0]; rz(2 * theta) q[1]; rz(3 * theta) q[2]; rz(4 * theta) q[3]; rz(5 * theta) q[4];
cx q[0], q[1]; cx q[1], q[2]; cx q[2], q[3]; cx q[3], q[4];
ry(theta / 2) q[0]; ry(theta / 3) q[1]; ry(theta / 4) q[2]; ry(theta / 5) q[3]; ry(theta) q[4];
cx q[4], q[0]; cx q[3], q[1]; cx q[2], q[0]; cx q[1], q[4];
rx(theta) q[2]; rx(-theta) q[3];
c = measure q;
"""


def bare_sqlite_rate(n: int, where: Path) -> float:
    import sqlite3

    conn = sqlite3.connect(where / "bare.db", isolation_level=None)
    conn.execute("PRAGMA journal_mode=WAL")
    conn.execute("PRAGMA synchronous=FULL")
    conn.execute("CREATE TABLE t (id INTEGER PRIMARY KEY, state TEXT, payload TEXT)")
    start = time.perf_counter()
    for i in range(n):
        conn.execute("BEGIN IMMEDIATE")
        conn.execute("INSERT INTO t (id, state, payload) VALUES (?, 'queued', ?)", (i, "x" * 200))
        conn.execute("UPDATE t SET state = 'done' WHERE id = ?", (i,))
        conn.execute("COMMIT")
    elapsed = time.perf_counter() - start
    conn.close()
    return n / elapsed


def warm_up(where: Path, program: Path) -> None:
    """One point through a throwaway keep: the modules a first job imports are loaded."""
    with Keeper.open(where / "warm") as keeper:
        keeper.run(program, inputs=["theta=0.5"], shots=10, seed=1)


def sweep_rate(n: int, where: Path, program: Path, *, batches: bool) -> tuple[float, float]:
    """Points per second from the submission to the last archived point, and the share
    of that time the submission took."""
    with Keeper.open(where / f"keep-{'batched' if batches else 'single'}") as keeper:
        start = time.perf_counter()
        run = keeper.submit_sweep(program, axes=[f"theta=0:3.14159:{n}"], shots=SHOTS, seed=7)
        submitted = time.perf_counter()
        stats = keeper.work(once=True, batches=batches, idle_sleep=0.01)
        elapsed = time.perf_counter() - start
        assert stats.done == n and len(run) == n, stats
        entries = len(keeper.store.log_entries())
        assert (entries < n) if batches else (entries == n), entries
    return n / elapsed, (submitted - start) / elapsed


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true", help="200 points instead of 1,000")
    parser.add_argument("--rounds", type=int, default=3, help="interleaved rounds (median)")
    args = parser.parse_args()
    n = 200 if args.quick else 1000
    bare: list[float] = []
    batched: list[float] = []
    single: list[float] = []
    shares: list[float] = []
    with tempfile.TemporaryDirectory() as tmp:
        program = Path(tmp) / "scan.qasm"
        program.write_text(TEMPLATE)
        template = load_template(program)
        operations = len(template.bind({"theta": 0.1}).operations)
        warm_up(Path(tmp), program)
        for round_ in range(args.rounds):
            where = Path(tmp) / f"round{round_}"
            where.mkdir()
            bare.append(bare_sqlite_rate(n, where))
            rate, share = sweep_rate(n, where, program, batches=True)
            batched.append(rate)
            shares.append(share)
            single.append(sweep_rate(n, where, program, batches=False)[0])
    to_bare = statistics.median(b / s for b, s in zip(batched, bare, strict=True))
    to_single = statistics.median(b / s for b, s in zip(batched, single, strict=True))
    print(
        f"a {n}-point sweep of a 5-qubit, {operations}-operation template at {SHOTS} shots, "
        f"submission to archive, one worker ({args.rounds} interleaved rounds):"
    )
    print(
        f"  bare SQLite (one insert+update transaction per point, WAL, synchronous=FULL): "
        f"median {statistics.median(bare):.0f} txn/s (rounds: {_list(bare, '.0f')})"
    )
    print(
        f"  batched: median {statistics.median(batched):.0f} points/s "
        f"(rounds: {_list(batched, '.0f')}); one job at a time: median "
        f"{statistics.median(single):.0f} points/s (rounds: {_list(single, '.0f')})"
    )
    print(
        f"  of the batched time, submitting (binding every point, one transaction) took "
        f"{statistics.median(shares):.0%}; the points run one by one on the simulator "
        "(no engine that runs a batch at once yet)"
    )
    print(
        f"  batched / bare SQLite: {to_bare:.2f} (target >= {TARGET_BARE}) "
        f"{'PASS' if to_bare >= TARGET_BARE else 'MISS'}"
    )
    print(
        f"  batched / one job at a time: {to_single:.2f} (target >= {TARGET_SINGLE}) "
        f"{'PASS' if to_single >= TARGET_SINGLE else 'MISS'}"
    )


def _list(values: list[float], spec: str) -> str:
    return ", ".join(format(v, spec) for v in values)


if __name__ == "__main__":
    main()
