"""Benchmark of the trajectory simulator against one noiseless run of the same circuit.

Measured in one run, each figure in a fresh child process (so that peak resident memory
is that run's own):

* a random 20-qubit circuit of depth 20 (per layer: u3 with random angles on every
  qubit, then CX on alternating pairs) with 200 shots, one trajectory each, under
  two-qubit error 0.5%, readout error 1%, T1 = 100 µs, T2 = 80 µs, one-qubit gates
  50 ns, two-qubit gates 300 ns;
* the time per trajectory as a ratio to one noiseless run of the same circuit
  (the state-vector backend, 200 shots): target ≤ 0.6;
* peak resident memory above the child's baseline (after imports and building the
  circuit) as a ratio to the noiseless run's: target ≤ 2;
* the same circuit at 24 qubits with a few trajectories, to show that it runs (time and
  memory printed, no target).

Times are CPU time of the child (on a shared machine other processes stretch wall time,
not CPU time); wall time is printed beside. Single-threaded BLAS.
``--quick`` runs smaller sizes (a smoke run; its figures are not the targets').
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import json  # noqa: E402
import resource  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from typing import Any  # noqa: E402

import numpy as np  # noqa: E402

from jobkeeper.backend import Task  # noqa: E402
from jobkeeper.backends.sim.statevector import StatevectorBackend  # noqa: E402
from jobkeeper.backends.sim.trajectories import TrajectoryBackend  # noqa: E402
from jobkeeper.circuit.ir import Circuit, Operation, Register  # noqa: E402

NOISE: dict[str, Any] = {
    "depolarizing_2q": 0.005,
    "readout_error": 0.01,
    "t1": 100e-6,
    "t2": 80e-6,
    "gate_time_1q": 50e-9,
    "gate_time_2q": 300e-9,
}
TIME_TARGET = 0.6
MEMORY_TARGET = 2.0


def random_circuit(n: int, depth: int, seed: int = 20) -> Circuit:
    rng = np.random.default_rng(seed)
    ops: list[Operation] = []
    for layer in range(depth):
        for q in range(n):
            angles = tuple(float(a) for a in rng.uniform(-np.pi, np.pi, 3))
            ops.append(Operation("u3", (q,), angles))
        for q in range(layer % 2, n - 1, 2):
            ops.append(Operation("cx", (q, q + 1)))
    ops += [Operation("measure", (q,), (), (q,)) for q in range(n)]
    return Circuit(
        num_qubits=n,
        num_clbits=n,
        qregs=(Register("q", n, 0),),
        cregs=(Register("c", n, 0),),
        operations=tuple(ops),
    )


def _rss() -> int:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def child(kind: str, n: int, depth: int, shots: int) -> dict[str, Any]:
    """One measured run in this process (called in a fresh child)."""
    circuit = random_circuit(n, depth)
    if kind == "noiseless":
        backend: Any = StatevectorBackend()
    else:
        backend = TrajectoryBackend(config={"adapter": "trajectories", **NOISE})
    # The baseline holds the interpreter, numpy, the circuit and the backend; a tiny run
    # first loads the code paths (and BLAS) that the measured run then uses.
    backend.execute(Task(random_circuit(4, 2), shots=4, seed=1))
    base = _rss()
    cpu, wall = time.process_time(), time.perf_counter()
    result = backend.execute(Task(circuit, shots=shots, seed=7))
    cpu, wall = time.process_time() - cpu, time.perf_counter() - wall
    return {
        "cpu": cpu,
        "wall": wall,
        "rss_above_baseline": _rss() - base,
        "trajectories": result.metadata.get("trajectories"),
        "with_events": result.metadata.get("trajectories_with_events"),
    }


def measure(kind: str, n: int, depth: int, shots: int) -> dict[str, Any]:
    args = [sys.executable, __file__, "--child", kind, str(n), str(depth), str(shots)]
    out = subprocess.run(args, check=True, capture_output=True, text=True).stdout
    figures: dict[str, Any] = json.loads(out.strip().splitlines()[-1])
    return figures


def verdict(ok: bool) -> str:
    return "PASS" if ok else "MISS"


def main() -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--child", nargs=4, metavar=("KIND", "N", "DEPTH", "SHOTS"))
    args = parser.parse_args()
    if args.child:
        kind, n, depth, shots = args.child
        print(json.dumps(child(kind, int(n), int(depth), int(shots))))
        return 0
    n, depth, shots, big, big_shots = (12, 10, 50, 14, 4) if args.quick else (20, 20, 200, 24, 8)
    print(f"noise: {NOISE}")
    ideal = measure("noiseless", n, depth, shots)
    noisy = measure("trajectories", n, depth, shots)
    per = noisy["cpu"] / noisy["trajectories"]
    ratio_time = per / ideal["cpu"]
    ratio_mem = noisy["rss_above_baseline"] / max(1, ideal["rss_above_baseline"])
    mib = 1 << 20
    print(
        f"{n} qubits, depth {depth}, {shots} shots: noiseless run {ideal['cpu']:.3f} s CPU "
        f"({ideal['wall']:.3f} s wall), {ideal['rss_above_baseline'] / mib:.0f} MiB above "
        "baseline"
    )
    print(
        f"  trajectories: {noisy['trajectories']} ({noisy['with_events']} with an event) in "
        f"{noisy['cpu']:.2f} s CPU ({noisy['wall']:.2f} s wall), "
        f"{noisy['rss_above_baseline'] / mib:.0f} MiB above baseline"
    )
    print(
        f"  time per trajectory / noiseless run: {ratio_time:.3f} "
        f"(target ≤ {TIME_TARGET}) {verdict(ratio_time <= TIME_TARGET)}"
    )
    print(
        f"  peak memory above baseline / noiseless run's: {ratio_mem:.2f} "
        f"(target ≤ {MEMORY_TARGET}) {verdict(ratio_mem <= MEMORY_TARGET)}"
    )
    large = measure("trajectories", big, depth, big_shots)
    print(
        f"{big} qubits, depth {depth}, {big_shots} trajectories: {large['cpu']:.1f} s CPU "
        f"({large['wall']:.1f} s wall), {large['rss_above_baseline'] / mib:.0f} MiB above "
        "baseline (no target: it runs)"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
