"""Benchmark of the state-vector simulator: kernels, a random circuit, sampling.

Prints figures and ratios measured in one run, each with its target and PASS/MISS:

* time per single- and two-qubit dense gate at 20, 22 and 24 qubits (median of 3 runs
  per target), and each kernel's effective memory bandwidth (bytes read + written per
  pass over the state / time) as a ratio to numpy's own copy bandwidth (np.copyto over
  an array of the same size, timed next to each kernel run); targets at 24 qubits:
  ≥ 0.5 at the median target, ≥ 0.3 at the worst;
* a random 24-qubit circuit of depth 10 (per layer: u3 with random angles on every
  qubit, then CX on alternating pairs), run through the backend with 1000 shots;
  target ≤ 19.5 s;
* sampling 10^6 shots from a 20-qubit distribution: the backend's draw plus counts within
  2× one ``Generator.multinomial`` over the same probabilities, and the conversion to
  counts no dearer than that draw.

Single-threaded BLAS: the thread variables are set before numpy is imported.
``--quick`` runs smaller sizes (a smoke run; its figures are not the targets').
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import statistics  # noqa: E402
import time  # noqa: E402
from collections.abc import Callable  # noqa: E402

import numpy as np  # noqa: E402

from jobkeeper.backend import Task  # noqa: E402
from jobkeeper.backends.sim import kernels  # noqa: E402
from jobkeeper.backends.sim.program import Gates, compile_circuit  # noqa: E402
from jobkeeper.backends.sim.sampling import BitFormatter, counts_of_draws, draw  # noqa: E402
from jobkeeper.backends.sim.statevector import StatevectorBackend  # noqa: E402
from jobkeeper.circuit.ir import Circuit, Operation, Register  # noqa: E402
from jobkeeper.counts import CountTable  # noqa: E402
from jobkeeper.hashing import canonical_json  # noqa: E402

REPEATS = 3


#: "cpu" (this process's CPU time) or "wall"; set in main. On a shared machine other
#: processes stretch wall time but not CPU time, so both are reported and CPU time is
#: the default measure of the code itself.
CLOCK = "cpu"


def _now() -> float:
    return time.process_time() if CLOCK == "cpu" else time.perf_counter()


def median_time(fn: Callable[[], object], repeats: int = REPEATS) -> float:
    times = []
    for _ in range(repeats):
        start = _now()
        fn()
        times.append(_now() - start)
    return statistics.median(times)


def verdict(ok: bool) -> str:
    return "PASS" if ok else "MISS"


def random_unitary(rng: np.random.Generator, k: int) -> np.ndarray:
    z = rng.normal(size=(1 << k, 1 << k)) + 1j * rng.normal(size=(1 << k, 1 << k))
    return np.linalg.qr(z)[0]


def gate_pairs(n: int) -> list[tuple[int, int]]:
    """Neighbouring pairs at every height, plus spread pairs."""
    pairs = [(t + 1, t) for t in range(n - 1)]
    pairs += [(n - 1, 0), (n // 2, 0), (n - 1, n // 2), (n - 3, 2), (n - 1, 1)]
    return pairs


def paired(fn: Callable[[], object], copy: Callable[[], object]) -> tuple[float, float]:
    """(median time of ``fn``, median ratio copy time / ``fn`` time), each run of ``fn``
    timed right after a copy: on a shared machine the speed drifts over a run of
    minutes, and a copy timed once at the start judged later kernels by another speed."""
    times, ratios = [], []
    for _ in range(REPEATS):
        t_copy = median_time(copy, 1)
        t_fn = median_time(fn, 1)
        times.append(t_fn)
        ratios.append(t_copy / t_fn)
    return statistics.median(times), statistics.median(ratios)


def bench_kernels(n: int, rng: np.random.Generator) -> dict[str, list[float]]:
    state = rng.normal(size=1 << n) + 1j * rng.normal(size=1 << n)
    state /= np.linalg.norm(state)
    target = np.empty_like(state)

    def copy() -> None:
        np.copyto(target, state)

    t_copy = median_time(copy, 5)
    u1, u2 = random_unitary(rng, 1), random_unitary(rng, 2)
    pairs = gate_pairs(n)
    single = [paired(lambda t=t: kernels.apply_dense(state, n, u1, (t,)), copy) for t in range(n)]
    double = [paired(lambda p=p: kernels.apply_dense(state, n, u2, p), copy) for p in pairs]
    print(f"\n{n} qubits: state {state.nbytes / 2**20:.0f} MiB, np.copyto {t_copy * 1e3:.1f} ms")
    for label, runs in (("1-qubit", single), ("2-qubit", double)):
        times, ratios = [r[0] for r in runs], [r[1] for r in runs]
        print(
            f"  {label} gate: median {statistics.median(times) * 1e3:7.1f} ms, "
            f"worst {max(times) * 1e3:7.1f} ms; bandwidth / copy: median "
            f"{statistics.median(ratios):.2f}, worst {min(ratios):.2f}"
        )
    print("  1-qubit ratio by target: " + " ".join(f"{r:.2f}" for _, r in single))
    print(
        "  2-qubit ratio by pair: "
        + " ".join(f"{p[0]},{p[1]}:{r:.2f}" for p, (_, r) in zip(pairs, double, strict=True))
    )
    return {"single": [r for _, r in single], "double": [r for _, r in double]}


def random_circuit(n: int, depth: int, rng: np.random.Generator) -> Circuit:
    ops: list[Operation] = []
    for layer in range(depth):
        ops += [Operation("u3", (q,), tuple(rng.uniform(0, 2 * np.pi, 3))) for q in range(n)]
        ops += [Operation("cx", (q, q + 1)) for q in range(layer % 2, n - 1, 2)]
    ops += [Operation("measure", (q,), (), (q,)) for q in range(n)]
    return Circuit(
        num_qubits=n,
        num_clbits=n,
        qregs=(Register("q", n, 0),),
        cregs=(Register("c", n, 0),),
        operations=tuple(ops),
    )


def bench_circuit(n: int, depth: int, target: float | None) -> None:
    circuit = random_circuit(n, depth, np.random.default_rng(1))
    backend = StatevectorBackend(config={"max_qubits": 32})
    program = compile_circuit(circuit, backend.fusion_width)
    blocks = [b for step in program.steps if isinstance(step, Gates) for b in step.blocks]
    widths = [len(b.qubits) for b in blocks]
    wall, cpu = time.perf_counter(), time.process_time()
    backend.execute(Task(circuit, 1000, seed=1))
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    gates = sum(1 for op in circuit.operations if op.name != "measure")
    print(
        f"\nrandom circuit: {n} qubits, depth {depth}, {gates} gates fused into "
        f"{len(blocks)} blocks (widths {min(widths)}-{max(widths)}): "
        f"CPU {cpu:.2f} s, wall {wall:.2f} s"
    )
    if target is not None:
        print(
            f"  target ≤ {target} s: CPU {verdict(cpu <= target)}, wall {verdict(wall <= target)}"
        )


def bench_sampling(n: int, shots: int) -> None:
    rng = np.random.default_rng(3)
    amplitudes = rng.normal(size=1 << n) + 1j * rng.normal(size=1 << n)
    probs = np.abs(amplitudes) ** 2
    probs /= probs.sum()
    formatter = BitFormatter([Register("c", n, 0)], n, list(range(n)))
    t_numpy = median_time(lambda: np.random.Generator(np.random.PCG64(1)).multinomial(shots, probs))
    drawn = draw(np.random.Generator(np.random.PCG64(1)), shots, probs)
    t_draw = median_time(lambda: draw(np.random.Generator(np.random.PCG64(1)), shots, probs))
    t_counts = median_time(lambda: counts_of_draws(formatter, [(0, drawn)]))
    counts = counts_of_draws(formatter, [(0, drawn)])
    distinct = len(counts)
    kind = type(counts).__name__
    print(
        f"\nsampling {shots} shots over 2^{n} outcomes ({distinct} distinct, as a {kind}): "
        f"numpy multinomial {t_numpy * 1e3:.0f} ms, our draw {t_draw * 1e3:.0f} ms, "
        f"counts {t_counts * 1e3:.0f} ms"
    )
    total = (t_draw + t_counts) / t_numpy
    print(f"  draw + counts = {total:.2f} × multinomial, target ≤ 2: {verdict(total <= 2)}")
    ratio = t_counts / t_numpy
    print(f"  counts = {ratio:.2f} × multinomial, target ≤ 1: {verdict(ratio <= 1)}")
    if isinstance(counts, CountTable):
        # What the table saves later, measured too: the archive writes canonical JSON of
        # the counts three times; a dict of the same counts (made here once) is written
        # by the general canonical JSON writer.
        plain = counts.to_dict()
        t_dict = median_time(lambda: CountTable(*counts.arrays()).to_dict())
        t_table_json = median_time(lambda: CountTable(*counts.arrays()).canonical_json())
        t_dict_json = median_time(lambda: canonical_json(plain), 1)
        print(
            f"  later, if asked for: a dict of the strings {t_dict * 1e3:.0f} ms; canonical "
            f"JSON for the archive {t_table_json * 1e3:.0f} ms from the table, "
            f"{t_dict_json * 1e3:.0f} ms from a dict"
        )


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes, a smoke run")
    parser.add_argument(
        "--clock", choices=("cpu", "wall"), default="cpu", help="what the kernel figures time"
    )
    args = parser.parse_args(argv)
    global CLOCK
    CLOCK = args.clock
    sizes = (12, 14, 16) if args.quick else (20, 22, 24)
    print(
        f"numpy {np.__version__}, single-threaded BLAS, median of {REPEATS} runs, "
        f"{CLOCK} time ({os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.1f})"
    )
    rng = np.random.default_rng(0)
    ratios: dict[str, list[float]] = {}
    for n in sizes:
        ratios = bench_kernels(n, rng)
    largest = sizes[-1]
    for label in ("single", "double"):
        med, worst = statistics.median(ratios[label]), min(ratios[label])
        print(
            f"{largest} qubits, {label}-qubit kernel: bandwidth / copy median {med:.2f} "
            f"(target ≥ 0.5: {verdict(med >= 0.5)}), worst {worst:.2f} "
            f"(target ≥ 0.3: {verdict(worst >= 0.3)})"
        )
    if args.quick:
        bench_circuit(16, 10, None)
        bench_sampling(14, 10_000)
    else:
        bench_circuit(24, 10, 19.5)
        bench_sampling(20, 1_000_000)


if __name__ == "__main__":
    main()
