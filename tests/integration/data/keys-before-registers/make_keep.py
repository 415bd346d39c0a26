"""Makes the fixture keep and bundle written before count keys named their registers
(an invented scenario): a three-register readout of a small teleportation-style circuit
run twice for "fig4" and compared, a Bell pair for "fig4", and the three-register job
compared with its ideal distribution. Run from a checkout of that version:

    python make_keep.py KEEP_DIR BUNDLE_FILE
"""

import json
import sys
from pathlib import Path

from jobkeeper import Keeper

keep = Path(sys.argv[1])
bundle = Path(sys.argv[2])
# Registers: a (2 bits, a[0] set by x), b (1 bit, a coin flip); the keys of this version
# write the last declared register first, a space between registers: "1 01" or "0 01".
REGISTERS = (
    'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[3];\ncreg a[2];\ncreg b[1];\n'
    "x q[0];\nh q[2];\nmeasure q[0] -> a[0];\nmeasure q[1] -> a[1];\nmeasure q[2] -> b[0];\n"
)
BELL = (
    'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c[2];\nh q[0];\ncx q[0],q[1];\n'
    "measure q -> c;\n"
)
with Keeper.open(keep) as k:
    first = k.run(REGISTERS, shots=400, seed=5, labels={"fig4"})
    second = k.run(REGISTERS, shots=400, seed=8, labels={"fig4"})
    bell = k.run(BELL, shots=200, seed=7, labels={"fig4"})
    pair = k.compare(first, second)
    ideal = k.compare(first, ideal=True)
    held = k.bundle(bundle, label="fig4")
    print(
        json.dumps(
            {
                "jobs": {j.id: j.counts for j in (first, second, bell)},
                "comparisons": [pair.record.id, ideal.record.id],
                "bundle_jobs": held,
            },
            indent=1,
        )
    )
