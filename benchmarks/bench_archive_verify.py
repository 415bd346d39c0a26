"""Verifying a real archive: ``jobkeeper verify --all`` over jobs archived by the worker,
against the bare Ed25519 verify rate, measured in one run.

Jobs run on the shipped recording backend (a fast stand-in device; the runs are invented)
through the real worker: sealed, logged in group commits with a signed checkpoint per
commit. Then ``Keeper.verify`` checks every envelope signature and subject digest against
the stored counts, every checkpoint's signature and root, and consistency; the bare rate is
``Ed25519PublicKey.verify`` over the same envelopes' signatures. Target ratio ≥ 0.5.
"""

from __future__ import annotations

import argparse
import base64
import json
import tempfile
import time
from pathlib import Path

from jobkeeper import Keeper
from jobkeeper.provenance import pae
from jobkeeper.provenance.keys import load_public_key

TARGET = 0.5


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true", help="1,000 jobs instead of 10,000")
    args = parser.parse_args()
    n = 1000 if args.quick else 10_000
    with tempfile.TemporaryDirectory() as tmp:
        keep = Path(tmp) / "keep"
        keep.mkdir()
        (keep / "config.toml").write_text(
            f'[backends.rec]\nadapter = "recording"\nledger_dir = "{Path(tmp) / "ledger"}"\n'
        )
        with Keeper.open(keep) as keeper:
            start = time.perf_counter()
            texts = [
                'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[3];\ncreg c[3];\n'
                f"rz({0.0001 * i!r}) q[0];\nh q[0];\ncx q[0],q[1];\ncx q[1],q[2];\nmeasure q -> c;\n"
                for i in range(n)
            ]
            keeper.submit_many(texts, backend="rec", shots=1000)
            keeper.work(once=True, local_executor="thread", in_flight=256)
            archived = time.perf_counter() - start
            entries = keeper.store.log_entries()
            checkpoints = len(keeper.store.checkpoints())
            start = time.perf_counter()
            report = keeper.verify()
            verify_s = time.perf_counter() - start
            assert report.ok, report.problems[:5]
            keys = {fp: load_public_key(base64.b64decode(k))
                    for fp, k in keeper.store.public_keys().items()}  # fmt: skip
            signed = []
            for entry in entries:
                envelope = json.loads(entry.envelope)
                body = base64.b64decode(envelope["payload"])
                sig = base64.b64decode(envelope["signatures"][0]["sig"])
                signed.append((keys[entry.signer], sig, pae(envelope["payloadType"], body)))
            start = time.perf_counter()
            for key, sig, message in signed:
                key.verify(sig, message)
            bare_s = time.perf_counter() - start
    rate, bare = n / verify_s, n / bare_s
    ratio = rate / bare
    print(
        f"archive verify: {n} jobs archived in {archived:.1f} s with {checkpoints} checkpoints; "
        f"verify --all {rate:8.0f} jobs/s, bare Ed25519 verify {bare:8.0f} sig/s, "
        f"ratio {ratio:.2f} (target >= {TARGET}) {'PASS' if ratio >= TARGET else 'MISS'}"
    )


if __name__ == "__main__":
    main()
