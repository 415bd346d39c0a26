"""End-to-end throughput of the keeper against the bare limit of SQLite on this disk.

Measured in one run: (a) 1,000 distinct 2-qubit circuits submitted, drained by one worker
on the state-vector backend and archived (signed manifest, log entry, checkpoint); (b) the
bare limit: 1,000 SQLite transactions each holding one insert and one update, with the
same durability setting the keeper uses (WAL, synchronous=FULL). Target ratio ≥ 0.25.
"""

from __future__ import annotations

import argparse
import sqlite3
import tempfile
import time
from pathlib import Path

from jobkeeper import Keeper

TARGET = 0.25


def circuits(n: int) -> list[str]:
    return [
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c[2];\n'
        f"rz({0.001 * i!r}) q[0];\nh q[0];\ncx q[0],q[1];\nmeasure q -> c;\n"
        for i in range(n)
    ]


def keeper_rate(n: int, executor: str) -> tuple[float, int]:
    with tempfile.TemporaryDirectory() as tmp, Keeper.open(Path(tmp) / "keep") as keeper:
        texts = circuits(n)
        start = time.perf_counter()
        keeper.submit_many(texts, shots=100, seed=1)
        stats = keeper.work(once=True, local_executor=executor, concurrency=2, in_flight=64)
        elapsed = time.perf_counter() - start
        assert stats.done == n, stats
        return n / elapsed, len(keeper.store.checkpoints())


def bare_sqlite_rate(n: int) -> float:
    with tempfile.TemporaryDirectory() as tmp:
        conn = sqlite3.connect(Path(tmp) / "bare.db", isolation_level=None)
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("PRAGMA synchronous=FULL")
        conn.execute("CREATE TABLE t (id INTEGER PRIMARY KEY, state TEXT, payload TEXT)")
        start = time.perf_counter()
        for i in range(n):
            conn.execute("BEGIN IMMEDIATE")
            conn.execute(
                "INSERT INTO t (id, state, payload) VALUES (?, 'queued', ?)", (i, "x" * 200)
            )
            conn.execute("UPDATE t SET state = 'done' WHERE id = ?", (i,))
            conn.execute("COMMIT")
        elapsed = time.perf_counter() - start
        conn.close()
        return n / elapsed


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true", help="200 jobs instead of 1,000")
    parser.add_argument("--rounds", type=int, default=3, help="interleaved rounds (median)")
    args = parser.parse_args()
    n = 200 if args.quick else 1000
    # The disk's sync rate drifts with whatever else the machine does: bare and keeper
    # runs are interleaved and each round's ratio uses that round's own bare figure.
    rows = []
    for _ in range(args.rounds):
        bare = bare_sqlite_rate(n)
        rate, checkpoints = keeper_rate(n, "process")
        rows.append((rate / bare, rate, bare, checkpoints))
    rows.sort()
    ratio, rate, bare, checkpoints = rows[len(rows) // 2]
    verdict = "PASS" if ratio >= TARGET else "MISS"
    print(
        f"queue: {n} distinct 2-qubit jobs submitted, run and archived by one worker with its "
        f"defaults: {rate:8.1f} jobs/s ({checkpoints} group commits); bare SQLite (one "
        f"insert+update transaction per job, WAL, synchronous=FULL): {bare:8.1f} txn/s; "
        f"median ratio of {len(rows)} rounds {ratio:.2f} (target >= {TARGET}) {verdict}; "
        f"all rounds: {', '.join(f'{r[0]:.2f}' for r in sorted(rows, key=lambda r: r[2]))}"
    )


if __name__ == "__main__":
    main()
