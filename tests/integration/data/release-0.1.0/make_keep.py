"""Makes the schema-2 fixture keep with jobkeeper 0.1.0 as released (an invented scenario)."""

import json
import sys
from pathlib import Path

from jobkeeper import Keeper
from jobkeeper.queue import RetryPolicy

keep = Path(sys.argv[1])
ledger = Path(sys.argv[2])
keep.mkdir(parents=True)
(keep / "config.toml").write_text(
    f'store = "{sys.argv[3]}"\n\n'
    + '[defaults]\nmax_attempts = 5\n\n[backends.flaky]\nadapter = "flaky"\n'
    f'ledger_dir = "{ledger}"\nfailures = 2\n'
)
BELL = 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c[2];\nh q[0];\ncx q[0],q[1];\nmeasure q -> c;\n'
GHZ = 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[3];\ncreg c[3];\nh q[0];\ncx q[0],q[1];\ncx q[1],q[2];\nmeasure q -> c;\n'
X = 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[1];\ncreg c[1];\nx q[0];\nmeasure q -> c;\n'
with Keeper.open(keep) as k:
    k.run(BELL, shots=200, seed=7, label="fig2")
    k.run(BELL, shots=200, seed=7, label="fig3")  # deduplicated: 0.1.0 keeps only fig2
    k.run(GHZ, shots=100, seed=11, label="fig3")
    k.run(X, shots=50, seed=1)  # no label
    k.run_many(
        [X],
        backend="flaky",
        shots=10,
        seed=2,
        label="flaky",
        retry=RetryPolicy(base=0.01, cap=0.02),
    )  # two transient faults, then done
    q = k.submit(GHZ, shots=30, seed=3, label="later")  # left queued
    print(
        json.dumps([[j.id, j.state, j.label, j.attempts] for j in (r for r in k.store.list_jobs())])
    )
