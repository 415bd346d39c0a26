"""The web view at 100,000 jobs: the job list (first page, a deep page by cursor, filtered
by label and by state) under 0.3 s, and a job page under 0.2 s plus its verification,
over real HTTP on 127.0.0.1, measured in one run.

The store is seeded directly (``Store.enqueue``, queued jobs of an invented circuit family
with ten labels), then a few real jobs are run and sealed so that a job page has counts,
a figure, a manifest and a verification to show. Each figure is the median of 7 requests
after one warm-up; the job page's verification is timed alone (``Keeper.verify``, as the
page runs it) and subtracted.
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
import uuid
from pathlib import Path

import httpx

from jobkeeper import Keeper
from jobkeeper.spec import JobSpec
from jobkeeper.store import NewJob
from jobkeeper.web.server import BackgroundView

LIST_TARGET_S = 0.3
JOB_TARGET_S = 0.2
REPEATS = 7


def seed(keeper: Keeper, n: int) -> None:
    chunk = 5000
    for start in range(0, n, chunk):
        jobs = []
        for i in range(start, min(n, start + chunk)):
            text = f'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c[2];\nrz({i}) q[0];\n'
            spec = JobSpec(circuit_text=text, circuit_hash=f"sha256:{i:064x}",
                           backend="statevector", shots=1000, seed=i)  # fmt: skip
            jobs.append(NewJob(id=uuid.uuid4().hex, job_key=f"sha256:{uuid.uuid4().hex}",
                               spec=spec, max_attempts=3, labels=(f"series-{i % 10}",)))  # fmt: skip
        keeper.store.enqueue(jobs)


def median_seconds(client: httpx.Client, url: str) -> float:
    client.get(url).raise_for_status()
    times = []
    for _ in range(REPEATS):
        start = time.perf_counter()
        client.get(url).raise_for_status()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def verdict(seconds: float, target: float) -> str:
    return f"{seconds * 1000:7.1f} ms  (target < {target * 1000:.0f} ms, ratio {seconds / target:.2f})  {'PASS' if seconds < target else 'MISS'}"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true", help="10,000 jobs instead of 100,000")
    args = parser.parse_args()
    n = 10_000 if args.quick else 100_000
    with tempfile.TemporaryDirectory() as tmp:
        keep = Path(tmp) / "keep"
        with Keeper.open(keep) as keeper:
            start = time.perf_counter()
            seed(keeper, n)
            real = keeper.run(
                'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[3];\ncreg c[3];\n'
                "h q[0];\ncx q[0],q[1];\ncx q[1],q[2];\nmeasure q -> c;\n",
                shots=2000, seed=5, labels={"bench-real"},
            )  # fmt: skip
            print(f"seeded {n} jobs and ran 1 in {time.perf_counter() - start:.1f} s")
            deep = keeper.job_page(limit=n // 2)[-1].record
            cursor = f"{deep.created_at!r}~{deep.id}"
            start = time.perf_counter()
            keeper.verify([real.id])
            verify_s = time.perf_counter() - start
            with BackgroundView(keeper) as view, httpx.Client(base_url=view.url) as client:
                failures = 0
                for name, url in (
                    ("job list, first page", "/jobs"),
                    (f"job list, page after job {n // 2}", f"/jobs?after={cursor}"),
                    ("job list, one label (10%)", "/jobs?label=series-3"),
                    ("job list, state queued", "/jobs?state=queued"),
                    ("job list as JSON", "/api/jobs"),
                ):
                    seconds = median_seconds(client, url)
                    failures += seconds >= LIST_TARGET_S
                    print(f"{name:<38} {verdict(seconds, LIST_TARGET_S)}")
                page = median_seconds(client, f"/jobs/{real.id}")
                without = max(0.0, page - verify_s)
                failures += without >= JOB_TARGET_S
                print(f"{'job page (with its verification)':<38} {page * 1000:7.1f} ms")
                print(f"{'  its verification alone':<38} {verify_s * 1000:7.1f} ms")
                print(f"{'  job page less verification':<38} {verdict(without, JOB_TARGET_S)}")
            if failures:
                print(f"{failures} target(s) missed")


if __name__ == "__main__":
    main()
