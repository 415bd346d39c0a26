"""Many remote jobs in flight on one worker: memory, open connections, HTTP requests per job.

A loopback device (real HTTP on 127.0.0.1) holds every job for a long queue delay; one
worker process submits them all and polls them until done. Sampled in one run: the
worker's peak resident memory and peak open TCP connections, for 100 and for 1,000 jobs
in flight, and the device's count of HTTP requests per job. Bounded means: connections
never exceed the configured pool, and memory grows by a small amount per job in flight.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import psutil

from jobkeeper import Keeper
from jobkeeper.loopback.testing import running_device

POOL = 16
QUEUE_DELAY = 20.0


def circuit(i: int) -> str:
    return (
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c[2];\n'
        f"rz({0.0001 * i!r}) q[0];\nh q[0];\ncx q[0],q[1];\nmeasure q -> c;\n"
    )


def run(jobs: int) -> dict[str, float]:
    with tempfile.TemporaryDirectory() as tmp, running_device(queue_delay=QUEUE_DELAY) as device:
        keep = Path(tmp) / "keep"
        keep.mkdir()
        (keep / "config.toml").write_text(
            "[poll]\nfirst = 5.0\nfactor = 1.5\ncap = 10.0\n\n[backends.dev]\n"
            f'adapter = "rest"\nprofile = "loopback"\nurl = "{device.url}"\n'
            f'token_env = "{device.token_env}"\nmax_connections = {POOL}\n'
        )
        with Keeper.open(keep) as keeper:
            keeper.submit_many([circuit(i) for i in range(jobs)], backend="dev", shots=10)
        env = {**os.environ, device.token_env: device.token}
        worker = subprocess.Popen(
            [sys.executable, "-m", "jobkeeper", "worker", "--once", "--keep", str(keep),
             "--in-flight", "256"],
            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
        )  # fmt: skip
        proc = psutil.Process(worker.pid)
        peak_rss, peak_conns, in_flight_peak = 0, 0, 0
        deadline = time.monotonic() + QUEUE_DELAY * 6 + 120
        while worker.poll() is None and time.monotonic() < deadline:
            try:
                peak_rss = max(peak_rss, proc.memory_info().rss)
                peak_conns = max(peak_conns, len(proc.net_connections(kind="tcp")))
            except psutil.Error:
                break
            stats = device.stats()
            in_flight_peak = max(
                in_flight_peak, stats["jobs"] - stats.get("states", {}).get("done", 0)
            )
            time.sleep(0.2)
        if worker.poll() is None:
            worker.kill()
            raise SystemExit("worker did not finish in time")
        stats = device.stats()
        return {
            "jobs": jobs,
            "peak_rss_mb": peak_rss / 2**20,
            "peak_connections": peak_conns,
            "requests_per_job": stats["requests"] / jobs,
            "executions": stats["executions"],
            "duplicates": stats["duplicates"],
            "in_flight_peak": in_flight_peak,
        }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true", help="100 and 300 jobs")
    args = parser.parse_args()
    small, large = (100, 300) if args.quick else (100, 1000)
    a, b = run(small), run(large)
    for r in (a, b):
        print(
            f"rest: {r['jobs']:5d} jobs, peak in flight on the device {r['in_flight_peak']:5d}: "
            f"peak RSS {r['peak_rss_mb']:6.1f} MiB, peak TCP connections "
            f"{r['peak_connections']} (pool {POOL}), HTTP requests per job "
            f"{r['requests_per_job']:.2f}, executions {r['executions']}, duplicates {r['duplicates']}"
        )
    per_job_kib = (b["peak_rss_mb"] - a["peak_rss_mb"]) * 1024 / (large - small)
    conns_ok = b["peak_connections"] <= POOL + 2  # + the store's and the device's stats socket
    print(
        f"rest: memory per extra job in flight {per_job_kib:.1f} KiB (target <= 64 KiB) "
        f"{'PASS' if per_job_kib <= 64 else 'MISS'}; connections bounded by the pool: "
        f"{'PASS' if conns_ok else 'MISS'}; duplicates 0: "
        f"{'PASS' if a['duplicates'] == b['duplicates'] == 0 else 'MISS'}"
    )


if __name__ == "__main__":
    main()
