"""End-to-end throughput of the keeper against the bare limit of SQLite on this disk.

Measured in one run, in interleaved rounds (the disk's sync rate drifts with whatever
else the machine does, so each round's ratio uses that round's own bare figure):

* bare: 1,000 SQLite transactions each holding one insert and one update, with the
  durability setting the keeper uses by default (WAL, synchronous=FULL);
* one call, one worker: 1,000 distinct 2-qubit circuits submitted in one call, then
  drained by one worker in this process on the state-vector backend, each archived with
  its signed manifest, log entry and checkpoint;
* one call, a worker per core: the same, drained by one worker process per core;
* steady state: a worker per core already running while the 1,000 circuits arrive in
  submissions of 50 (a sweep script, several users), the way a keep runs day to day.

Workers are started, have run one job elsewhere (the imports a first job costs) and have
opened the keep before the clock starts, as running daemons would have. The clock runs
from the first submission to the last archived job. Target ratio ≥ 0.25.
"""

from __future__ import annotations

import argparse
import asyncio
import multiprocessing as mp
import os
import sqlite3
import statistics
import tempfile
import threading
import time
from multiprocessing.synchronize import Barrier, Event
from pathlib import Path

from jobkeeper import Keeper
from jobkeeper.worker import settle_daemon

TARGET = 0.25


def circuits(n: int) -> list[str]:
    return [
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c[2];\n'
        f"rz({0.001 * i!r}) q[0];\nh q[0];\ncx q[0],q[1];\nmeasure q -> c;\n"
        for i in range(n)
    ]


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


#: submissions of this many circuits each, in the steady-state run.
BATCH = 50


def warm_up() -> None:
    """One job through a throwaway keep: the modules a first job imports (backends,
    sealing, numpy's lazy parts) are loaded, as in a daemon that has been running."""
    with tempfile.TemporaryDirectory() as tmp, Keeper.open(Path(tmp) / "warm") as keeper:
        keeper.run(circuits(1)[0], shots=10, seed=1)


def _serve(path: Path, ready: Barrier, go: Event, stop: Event) -> None:
    """A worker daemon in a process of its own: drains the keep until ``stop``."""
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    warm_up()
    with Keeper.open(path) as keeper:
        # A short idle sleep: between two submissions the queue may run dry for a moment.
        worker = keeper.worker(idle_sleep=0.02)
        settle_daemon()  # as `jobkeeper worker` does
        ready.wait(timeout=120)
        if not go.wait(timeout=120):
            return

        async def run() -> None:
            loop = asyncio.get_running_loop()

            def watch() -> None:
                stop.wait(timeout=600)
                loop.call_soon_threadsafe(worker.request_stop)

            threading.Thread(target=watch, daemon=True).start()
            await worker.run()

        asyncio.run(run())


def keeper_rate(n: int, processes: int, batch: int | None) -> float:
    """Jobs per second from the first submission to the last archived job.

    ``processes`` = 0: one worker in this process after one submission of everything;
    else that many worker processes, fed one submission of everything (``batch`` None)
    or submissions of ``batch`` circuits while they run."""
    texts = circuits(n)
    warm_up()
    with tempfile.TemporaryDirectory() as tmp, Keeper.open(Path(tmp) / "keep") as keeper:
        if processes == 0:
            start = time.perf_counter()
            keeper.submit_many(texts, shots=100, seed=1)
            keeper.work(once=True)
            elapsed = time.perf_counter() - start
        else:
            ctx = mp.get_context("spawn")
            ready, go, stop = ctx.Barrier(processes + 1), ctx.Event(), ctx.Event()
            workers = [
                ctx.Process(target=_serve, args=(keeper.path, ready, go, stop))
                for _ in range(processes)
            ]
            for worker in workers:
                worker.start()
            try:
                ready.wait(timeout=120)
                start = time.perf_counter()
                if batch is None:
                    keeper.submit_many(texts, shots=100, seed=1)
                    go.set()
                else:
                    go.set()
                    for first in range(0, n, batch):
                        keeper.submit_many(texts[first : first + batch], shots=100, seed=1)
                deadline = start + 300
                while keeper.store.counts_by_state().get("done", 0) < n:
                    if time.perf_counter() > deadline:
                        raise TimeoutError("the workers did not finish within 300 s")
                    time.sleep(0.005)
                elapsed = time.perf_counter() - start
            finally:
                stop.set()
                go.set()
                for worker in workers:
                    worker.join(timeout=60)
        states = keeper.store.counts_by_state()
        assert states.get("done") == n, states
        assert len(keeper.store.checkpoints()) >= 1
        return n / elapsed


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true", help="200 jobs instead of 1,000")
    parser.add_argument("--rounds", type=int, default=3, help="interleaved rounds (median)")
    args = parser.parse_args()
    n = 200 if args.quick else 1000
    cores = os.cpu_count() or 1
    runs = {
        "one call, one worker": (0, None),
        f"one call, a worker per core ({cores})": (cores, None),
        f"steady state: a worker per core, submissions of {BATCH}": (cores, BATCH),
    }
    bare_rates: list[float] = []
    ratios: dict[str, list[float]] = {label: [] for label in runs}
    rates: dict[str, list[float]] = {label: [] for label in runs}
    for _ in range(args.rounds):
        bare = bare_sqlite_rate(n)
        bare_rates.append(bare)
        for label, (processes, batch) in runs.items():
            rate = keeper_rate(n, processes, batch)
            rates[label].append(rate)
            ratios[label].append(rate / bare)
    print(
        f"bare SQLite (one insert+update transaction per job, WAL, synchronous=FULL): "
        f"median {statistics.median(bare_rates):.0f} txn/s "
        f"(rounds: {', '.join(f'{b:.0f}' for b in bare_rates)}); "
        f"{n} distinct 2-qubit jobs, from submission to archive:"
    )
    for label in runs:
        ratio = statistics.median(ratios[label])
        verdict = "PASS" if ratio >= TARGET else "MISS"
        print(
            f"  {label}: median {statistics.median(rates[label]):.0f} jobs/s; ratio to bare "
            f"{ratio:.2f} (target >= {TARGET}) {verdict}; rounds: "
            f"{', '.join(f'{r:.2f}' for r in ratios[label])}"
        )


if __name__ == "__main__":
    main()
