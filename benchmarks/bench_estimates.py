"""Benchmark of an estimate's own work against the jobs it runs.

A 1,000-term observable on 12 qubits (terms of 1–4 random Pauli factors with normal
coefficients, an invented example) measured on a random 12-qubit circuit: the time to
group the terms and split the shots (``plan_settings``) plus the time to aggregate the
settings' counts (``aggregate``), as a ratio to the time of simulating the settings'
jobs alone (the state-vector backend, seeded; one million shots in all). Target ≤ 0.2.
Rendering the document's canonical JSON is printed apart: with sealing (a signed
statement and a log entry) it comes with estimate records and joins the figure then.

Single-threaded BLAS: the thread variables are set before numpy is imported. CPU time of
this process is the measure. ``--quick`` runs 200 terms on 8 qubits (a smoke run).
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

from jobkeeper.backend import Task  # noqa: E402
from jobkeeper.backends.sim.statevector import StatevectorBackend  # noqa: E402
from jobkeeper.circuit.ir import Circuit, Operation, Register  # noqa: E402
from jobkeeper.estimates import aggregate, observable_from, plan_settings  # noqa: E402

TARGET = 0.2


def random_circuit(rng: np.random.Generator, n: int, layers: int) -> Circuit:
    ops: list[Operation] = []
    for _ in range(layers):
        ops.extend(Operation("u3", (q,), tuple(rng.uniform(-np.pi, np.pi, 3))) for q in range(n))
        order = rng.permutation(n)
        ops.extend(
            Operation("cx", (int(a), int(b))) for a, b in zip(order[::2], order[1::2], strict=True)
        )
    return Circuit(n, 0, (Register("q", n, 0),), (), tuple(ops))


def random_terms(rng: np.random.Generator, count: int, n: int) -> dict[str, float]:
    terms: dict[str, float] = {}
    while len(terms) < count:
        chosen = sorted(rng.choice(n, size=int(rng.integers(1, 5)), replace=False))
        terms[" ".join(f"{'XYZ'[rng.integers(3)]}{q}" for q in chosen)] = float(rng.normal())
    return terms


def main() -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true")
    args = parser.parse_args()
    terms, n = (200, 8) if args.quick else (1000, 12)
    rng = np.random.default_rng(15)
    circuit = random_circuit(rng, n, layers=4)
    observable = observable_from(random_terms(rng, terms, n))
    shots = 1000 * terms
    backend = StatevectorBackend()

    start = time.process_time()
    plan = plan_settings(circuit, observable, shots=shots)
    planned = time.process_time() - start

    start = time.process_time()
    counts = {
        s.index: backend.execute(Task(s.circuit, s.shots or 0, seed=s.index)).counts
        for s in plan.settings
    }
    jobs = time.process_time() - start

    start = time.process_time()
    document = aggregate(plan, counts)  # type: ignore[arg-type]
    aggregated = time.process_time() - start

    start = time.process_time()
    document.canonical_json()
    rendered = time.process_time() - start

    ratio = (planned + aggregated) / jobs
    print(
        f"{terms} terms on {n} qubits: {len(plan.settings)} settings, {shots} shots; "
        f"value {document.value:.4f} ± {document.standard_error:.4f}"
    )
    print(
        f"grouping + allocation {planned * 1e3:.0f} ms, aggregation {aggregated * 1e3:.0f} ms, "
        f"the settings' jobs alone {jobs * 1e3:.0f} ms"
    )
    verdict = "PASS" if ratio <= TARGET else "MISS"
    print(f"estimate's own work / jobs alone = {ratio:.3f} (target <= {TARGET}) {verdict}")
    print(
        f"not included: rendering the document's canonical JSON ({rendered * 1e3:.0f} ms) and "
        "sealing it (signed statement, log entry), which come with estimate records"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
