"""Benchmark of the density-matrix simulator: passes over ρ, noisy and noiseless runs, and
the pre-flight estimate.

Prints figures and ratios measured in one run, each with its target and PASS/MISS:

* the cost of one pass over ρ: numpy's own copy of an array of ρ's size (np.copyto) is
  the unit. A noiseless gate run costs per fused block two row-side kernel passes plus
  its share of one conjugate transpose; a noisy gate is one 16 × 16 superoperator pass
  on mixed row/column qubits. Targets at 11 qubits (ρ = 64 MiB): a noiseless block
  ≤ 8 copies, a noisy two-qubit gate ≤ 15 copies;
* the noiseless path against the superoperator path on the same circuit (the reason
  the noiseless path exists): target ≥ 1.5× faster;
* the estimate of an error-free run for 100,000 two-qubit operations: target ≤ 0.5 s.

Single-threaded BLAS: the thread variables are set before numpy is imported (threaded
BLAS on small matrices is many times slower on a loaded machine). CPU time of this
process is the measure. ``--quick`` runs at 8 qubits (a smoke run, not the targets).
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import statistics  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from collections.abc import Callable  # noqa: E402

import numpy as np  # noqa: E402

from jobkeeper.backends.sim import density_program  # noqa: E402
from jobkeeper.backends.sim.density_program import Channel, compile_density  # noqa: E402
from jobkeeper.backends.sim.density_state import initial_density  # noqa: E402
from jobkeeper.backends.sim.densitymatrix import DensityMatrixBackend, NoiseModel  # noqa: E402
from jobkeeper.circuit.ir import Circuit, Operation, Register  # noqa: E402

NOISE = NoiseModel(depolarizing_1q=0.001, depolarizing_2q=0.01, readout_error=0.01)


def median_cpu(fn: Callable[[], object], repeats: int = 3) -> float:
    times = []
    for _ in range(repeats):
        start = time.process_time()
        fn()
        times.append(time.process_time() - start)
    return statistics.median(times)


def verdict(ok: bool) -> str:
    return "PASS" if ok else "MISS"


def layered(n: int, depth: int, seed: int = 1) -> Circuit:
    """Per layer: u3 with random angles on every qubit, then cx on alternating pairs."""
    rng = np.random.default_rng(seed)
    ops: list[Operation] = []
    for layer in range(depth):
        ops += [Operation("u3", (q,), tuple(rng.uniform(-3, 3, 3))) for q in range(n)]
        ops += [Operation("cx", (q, q + 1)) for q in range(layer % 2, n - 1, 2)]
    return Circuit(n, 0, (Register("q", n, 0),), (), tuple(ops))


def run_steps(backend: DensityMatrixBackend, circuit: Circuit, noise: NoiseModel) -> int:
    """Simulate the compiled steps once; returns the number of blocks applied."""
    program = compile_density(circuit, noise, density_program.DEFAULT_MAX_WIDTH)
    backend.noise = noise
    backend.evolve(program)
    return sum(len(s.blocks) for s in program.steps if isinstance(s, Channel))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0] if __doc__ else "")
    parser.add_argument("--quick", action="store_true", help="8 qubits, a smoke run")
    args = parser.parse_args(argv)
    n = 8 if args.quick else 11
    misses = 0

    rho = initial_density(n)
    scratch = np.empty_like(rho)
    t_copy = median_cpu(lambda: np.copyto(scratch, rho), repeats=5)
    print(f"ρ of {n} qubits: {rho.nbytes / 2**20:.0f} MiB, one copy {t_copy * 1e3:.1f} ms (CPU)")

    circuit = layered(n, depth=6)
    backend = DensityMatrixBackend()
    noiseless = NoiseModel()
    blocks: list[int] = []
    t_clean = median_cpu(lambda: blocks.append(run_steps(backend, circuit, noiseless)))
    per_block = t_clean / blocks[-1] / t_copy
    ok = per_block <= 8
    misses += not ok
    print(
        f"noiseless: {len(circuit.operations)} gates in {blocks[-1]} blocks, {t_clean:.2f} s; "
        f"{per_block:.1f} copies per block (target ≤ 8) {verdict(ok)}"
    )

    noisy_blocks: list[int] = []
    t_noisy = median_cpu(lambda: noisy_blocks.append(run_steps(backend, circuit, NOISE)))
    per_noisy = t_noisy / noisy_blocks[-1] / t_copy
    ok = per_noisy <= 15
    misses += not ok
    print(
        f"noisy: {noisy_blocks[-1]} superoperator blocks, {t_noisy:.2f} s; "
        f"{per_noisy:.1f} copies per block (target ≤ 15) {verdict(ok)}"
    )

    # The superoperator path without noise (readout error alone leaves gates exact, so
    # force it with a zero-probability depolarizing channel that still counts as noise).
    forced = NoiseModel(depolarizing_1q=1e-300)
    t_super = median_cpu(lambda: run_steps(backend, circuit, forced))
    ratio = t_super / t_clean
    ok = ratio >= 1.5
    misses += not ok
    print(f"noiseless path vs superoperators: {ratio:.1f}× faster (target ≥ 1.5×) {verdict(ok)}")

    ops = [Operation("cx", (i % 20, (i + 1) % 20)) for i in range(100_000)]
    big = Circuit(20, 0, (Register("q", 20, 0),), (), tuple(ops))
    ion = DensityMatrixBackend(noise=NoiseModel(depolarizing_2q=0.005))
    start = time.process_time()
    log10_p = ion.success_probability(big)
    t_est = time.process_time() - start
    ok = t_est <= 0.5
    misses += not ok
    print(
        f"estimate for 100,000 cx at 99.5%: log10 p = {log10_p:.1f} in {t_est * 1e3:.0f} ms "
        f"(target ≤ 500 ms) {verdict(ok)}"
    )
    if args.quick:
        print("(--quick: smoke run; the targets are for 11 qubits)")
        return 0
    return 1 if misses else 0


if __name__ == "__main__":
    sys.exit(main())
