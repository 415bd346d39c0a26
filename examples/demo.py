"""jobkeeper's demo: submit circuits, drain the queue, show counts, deduplication and proof.

The scenario is invented: a small group checks three textbook circuits on the built-in
state-vector simulator before spending device time. Run it with ``make demo``.
"""

from __future__ import annotations

import sys
import tempfile
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
        return 0 if report.ok else 1


if __name__ == "__main__":
    sys.exit(main())
