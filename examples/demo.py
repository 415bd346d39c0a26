"""jobkeeper's demo: submit circuits, drain the queue, show counts, deduplication and proof,
then rehearse on a noisy stand-in of a device.

The scenario is invented: a small group checks three textbook circuits on the built-in
state-vector simulator before spending device time, then asks what the device would
probably return. The device is jobkeeper's loopback device on 127.0.0.1 with invented
calibration numbers (no real device is contacted). Run it with ``make demo``.
"""

from __future__ import annotations

import os
import secrets
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from jobkeeper import Keeper

HERE = Path(__file__).resolve().parent
CIRCUITS = [HERE / "circuits" / name for name in ("bell.qasm", "ghz5.qasm", "teleport.qasm")]


def main() -> int:
    keep = Path(tempfile.mkdtemp(prefix="jobkeeper-demo-")) / "keep"
    print(f"keep: {keep}")
    with Keeper.open(keep) as keeper:
        submitted = keeper.submit_many(CIRCUITS, shots=2000, seed=7, labels={"demo"})
        print(f"queued {len(submitted)} jobs on the built-in state-vector simulator")
        stats = keeper.work(once=True, local_executor="thread")
        print(f"worker: {stats.done} done, {stats.failed} failed\n")
        for path, item in zip(CIRCUITS, submitted, strict=True):
            job = item.job.refresh()
            print(f"{path.name}  (job {job.id[:12]}, {job.state}, seed {job.spec.seed})")
            counts = job.counts
            for outcome in sorted(counts, key=lambda key: (-counts[key], key)):
                share = counts[outcome] / job.spec.shots
                print(f"  {outcome}  {counts[outcome]:>5}  {share:6.1%}  {'█' * round(40 * share)}")
            print()
        again = keeper.submit_many(CIRCUITS[:1], shots=2000, seed=7, labels={"demo"})[0]
        print(
            f"submitting bell.qasm again: deduplicated={again.deduplicated}, "
            f"same job {again.job.id[:12]} — nothing runs twice"
        )
        report = keeper.verify([item.job.id for item in submitted])
        verdict = "all signatures, digests and log proofs hold" if report.ok else "PROBLEMS"
        print(f"verify: {report.checked} jobs checked, {verdict}")
        for problem in report.problems:
            print(f"  - {problem}")
    rehearsed = rehearse(keep, CIRCUITS[1])
    return 0 if report.ok and rehearsed else 1


def rehearse(keep: Path, circuit: Path) -> bool:
    """Run one job on the (loopback) device so its calibration is archived, then run the
    circuit on a trajectory simulator whose noise comes from that snapshot, and compare
    the noisy counts with the circuit's ideal distribution."""
    print("\nrehearsal on a noisy stand-in (invented device: the loopback device on 127.0.0.1)")
    token = secrets.token_hex(16)  # made up for this run; it lives only in the environment
    env = {**os.environ, "JOBKEEPER_LOOPBACK_TOKEN": token}
    port = free_port()
    command = [sys.executable, "-m", "jobkeeper", "loopback-device", "--port", str(port),
               "--queue-delay", "0.2", "--seed", "11"]  # fmt: skip
    with subprocess.Popen(
        command, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
    ) as device:
        try:
            wait_for_port(port, timeout=15.0)
            os.environ["DEMO_DEVICE_TOKEN"] = token
            (keep / "config.toml").write_text(
                "[backends.device]\n"
                'adapter = "rest"\nprofile = "loopback"\n'
                f'url = "http://127.0.0.1:{port}"\ntoken_env = "DEMO_DEVICE_TOKEN"\n\n'
                "[backends.standin]\n"
                'adapter = "trajectories"\nnoise_from = "device"\n'
            )
            return run_rehearsal(keep, circuit)
        finally:
            device.terminate()


def run_rehearsal(keep: Path, circuit: Path) -> bool:
    with Keeper.open(keep) as keeper:
        first = keeper.run(circuit, backend="device", shots=200, seed=3)
        print(f"device job {first.id[:12]}: {first.state}; its calibration is archived")
        noisy = keeper.run(circuit, backend="standin", shots=2000, seed=7)
        result = noisy.result
        noise = result.metadata.get("noise", {}) if result is not None else {}
        digest = str(noise.get("derived_from", {}).get("snapshot_digest", "?"))
        print(f"stand-in job {noisy.id[:12]}: {noisy.state}; noise from snapshot {digest[:19]}…")
        counts = noisy.counts
        for outcome in sorted(counts, key=lambda key: (-counts[key], key))[:4]:
            print(f"  {outcome}  {counts[outcome]:>5}  {counts[outcome] / 2000:6.1%}")
        judgement = keeper.compare(noisy, ideal=True)
        print(f"compare --ideal: {judgement.comparison.summary()}")
        print("(a simulated rehearsal with invented noise: it predicts, it does not measure)")
        return first.state == "done" and noisy.state == "done"


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def wait_for_port(port: int, *, timeout: float) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        with socket.socket() as probe:
            if probe.connect_ex(("127.0.0.1", port)) == 0:
                return
        time.sleep(0.1)
    raise SystemExit(f"the loopback device did not start on port {port} in {timeout:.0f} s")


if __name__ == "__main__":
    sys.exit(main())
