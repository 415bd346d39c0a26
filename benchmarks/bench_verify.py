"""How close full log verification comes to the bare Ed25519 verify rate.

Builds a log of signed run manifests in memory (real Ed25519 signatures, a signed
checkpoint every 1,000 entries; the runs are invented), then measures in the same process:

- ``verify_log``: every envelope signature, statement, subject digest, every checkpoint
  signature and root, consistency between successive checkpoints;
- bare ``Ed25519PublicKey.verify`` (the cryptography package) over the same signatures.

Prints both rates and their ratio; the target is a ratio of at least 0.5, i.e. the
bookkeeping around the signatures costs no more than the signatures themselves.

    python benchmarks/bench_verify.py            # 10,000 entries
    python benchmarks/bench_verify.py --quick    # 1,000 entries, for a smoke run
    python benchmarks/bench_verify.py --every 1  # a checkpoint per entry (two signatures each)
"""

from __future__ import annotations

import argparse
import base64
import json
import platform
import time
from typing import Any

from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

from jobkeeper.provenance import (
    LogEntry,
    MerkleTree,
    RunPredicate,
    fingerprint,
    make_bundle,
    pae,
    public_key_bytes,
    seal_run,
    sign_checkpoint,
    verify_bundle,
    verify_log,
)

TARGET = 0.5
ORIGIN = "jobkeeper.bench/keep"


def _predicate(i: int, counts: dict[str, int]) -> dict[str, Any]:
    # An invented but full-sized run record (3-qubit GHZ-like counts, 1,000 shots).
    return RunPredicate.model_validate(
        {
            "jobKey": f"sha256:{i:064x}",
            "circuit": {
                "canonicalText": "OPENQASM 2.0;\nqreg q[3];\ncreg c[3];\nh q[0];\n"
                "cx q[0],q[1];\ncx q[1],q[2];\nmeasure q[0] -> c[0];\n"
                "measure q[1] -> c[1];\nmeasure q[2] -> c[2];\n",
                "hash": "sha256:" + "cd" * 32,
                "sourceHash": "sha256:" + "ef" * 32,
            },
            "parameters": {},
            "shots": sum(counts.values()),
            "seed": str(1000 + i),
            "backend": {"name": "statevector", "kind": "simulator", "version": "0.1.0"},
            "software": {
                "jobkeeper": "0.1.0",
                "python": platform.python_version(),
                "numpy": "2",
                "platform": "linux",
            },
            "codeVersion": {"absent": True},
            "timestamps": {
                "submittedOn": "2026-12-01T10:00:00Z",
                "startedOn": "2026-12-01T10:00:01Z",
                "finishedOn": "2026-12-01T10:00:02Z",
            },
            "attempts": [{"number": 1, "startedOn": "2026-12-01T10:00:01Z", "outcome": "done"}],
            "counts": counts,
        }
    ).to_json()


def build(n: int, every: int) -> tuple[list[LogEntry], list[str], MerkleTree, Ed25519PrivateKey]:
    key = Ed25519PrivateKey.generate()
    entries: list[LogEntry] = []
    notes: list[str] = []
    tree = MerkleTree()
    for i in range(n):
        zeros = 480 + i % 40
        counts = {"000": zeros, "111": 1000 - zeros - 3, "010": 2, "101": 1}
        sealed = seal_run(counts, _predicate(i, counts), key)
        entries.append(LogEntry(sealed.envelope_bytes, sealed.signer, counts))
        tree.append(sealed.leaf_hash)
        if tree.size % every == 0:
            notes.append(sign_checkpoint(ORIGIN, tree.size, tree.root(), key))
    return entries, notes, tree, key


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--quick", action="store_true", help="1,000 entries instead of 10,000")
    parser.add_argument(
        "--every", type=int, default=0, help="entries per checkpoint (default n/10)"
    )
    parser.add_argument("--rounds", type=int, default=3, help="interleaved rounds (best kept)")
    args = parser.parse_args(argv)
    n = 1_000 if args.quick else 10_000
    every = args.every or n // 10

    t0 = time.perf_counter()
    entries, notes, tree, key = build(n, every)
    build_s = time.perf_counter() - t0
    keys = {fingerprint(key): public_key_bytes(key)}

    # Bare signature checks over exactly the same messages and signatures.
    pub = key.public_key()
    pairs = []
    for entry in entries:
        env = json.loads(entry.envelope)
        message = pae(env["payloadType"], base64.b64decode(env["payload"]))
        pairs.append((base64.b64decode(env["signatures"][0]["sig"]), message))
    bundle = make_bundle(tree, dict(enumerate(e.envelope for e in entries)), keys, notes[-1])

    def bare() -> None:
        for sig, message in pairs:
            pub.verify(sig, message)

    def log() -> None:
        report = verify_log(entries, notes, keys, origin=ORIGIN)
        if not report.ok:
            raise SystemExit(f"verify_log found problems in a clean log: {report.problems[:3]}")

    def bundled() -> None:
        report = verify_bundle(bundle, set(keys))
        if not report.ok:
            raise SystemExit(f"verify_bundle found problems: {report.problems[:3]}")

    # CPU time of this process, interleaved rounds, best of each: on a shared machine other
    # processes stretch wall-clock time of whichever measurement they overlap; CPU time is
    # far less affected, and the best round is the least disturbed one. Everything
    # measured runs single-threaded in this process.
    best = {"bare": float("inf"), "log": float("inf"), "bundle": float("inf")}
    for _ in range(args.rounds):
        for name, fn in (("bare", bare), ("log", log), ("bundle", bundled)):
            t0 = time.process_time()
            fn()
            best[name] = min(best[name], time.process_time() - t0)
    bare_s, log_s, bundle_s = best["bare"], best["log"], best["bundle"]

    bare_rate, log_rate, bundle_rate = n / bare_s, n / log_s, n / bundle_s
    ratio = log_rate / bare_rate
    print(
        f"entries                 {n:>10,}  (checkpoint every {every:,}; built in {build_s:.1f} s)"
    )
    print(f"rounds                  {args.rounds:>10}  (interleaved; best CPU time of each)")
    print(f"envelope size           {len(entries[0].envelope):>10,}  bytes")
    print(f"bare Ed25519 verify     {bare_rate:>10,.0f}  signatures/s")
    print(f"verify_log              {log_rate:>10,.0f}  entries/s  ({len(notes)} checkpoints)")
    print(f"verify_bundle           {bundle_rate:>10,.0f}  entries/s  (with inclusion proofs)")
    verdict = "PASS" if ratio >= TARGET else "MISS"
    print(f"ratio verify_log / bare {ratio:>10.2f}  target ≥ {TARGET}  {verdict}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
