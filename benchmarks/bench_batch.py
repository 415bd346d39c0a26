"""Benchmark of sweep batches on the state-vector simulator (issue 14, item 5; DESIGN §7).

The workload: a 5-qubit template of 30 operations with two ``input float`` parameters
(an invented scan: rotations whose angles depend on the inputs, CX ladders between
them), 1,000 points, 200 shots each. Measured in one run, rounds interleaved, median of
the rounds, CPU time of this process (a shared machine stretches wall time):

* the batch, ``StatevectorBackend.run_batch`` (binding included), against the same
  points one at a time: each bound by ``Template.bind`` and run by ``execute``; target
  ratio ≥ 5;
* the same one at a time with the interpreter's binding (what every point cost before
  templates were traced), for reference;
* binding per point: ``Template.bind``, ``bind_canonical`` (circuit and canonical text)
  and the job key (``spec.job_keys``), against the interpreter; target: the traced bind
  at least 5× cheaper than the interpreter.

Every batched point's counts are checked against its single job (same seed) first.
``--quick`` runs 200 points (a smoke run).
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import statistics  # noqa: E402
import time  # noqa: E402
from collections.abc import Callable  # noqa: E402

from jobkeeper.backend import BatchPoint, Task  # noqa: E402
from jobkeeper.backends.sim.statevector import StatevectorBackend  # noqa: E402
from jobkeeper.circuit import Template  # noqa: E402
from jobkeeper.hashing import sha256_tag  # noqa: E402
from jobkeeper.spec import JobSpec, job_keys  # noqa: E402

ROUNDS = 3
QUBITS = 5
SHOTS = 200


def template_text() -> str:
    """30 operations on 5 qubits: per layer, a rotation on each qubit whose angle
    depends on the inputs, then a CX ladder (an invented scan)."""
    lines = [
        "OPENQASM 3.0;",
        'include "stdgates.inc";',
        "input float[64] theta;",
        "input float[64] phi;",
        f"qubit[{QUBITS}] q;",
        f"bit[{QUBITS}] c;",
    ]
    count = 0
    layer = 0
    while count < 30:
        for k in range(QUBITS):
            if count == 30:
                break
            gate = ("ry", "rz", "rx")[layer % 3]
            lines.append(f"{gate}(theta * {k + 1} + phi / {layer + 1}) q[{k}];")
            count += 1
        for k in range(QUBITS - 1):
            if count == 30:
                break
            lines.append(f"cx q[{k}], q[{k + 1}];")
            count += 1
        layer += 1
    lines.append("c = measure q;")
    return "\n".join(lines) + "\n"


def cpu(fn: Callable[[], object]) -> float:
    start = time.process_time()
    fn()
    return time.process_time() - start


def verdict(ok: bool) -> str:
    return "PASS" if ok else "MISS"


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    args = parser.parse_args(argv)
    count = 200 if args.quick else 1000
    text = template_text()
    template = Template(text)
    backend = StatevectorBackend()
    points = [
        BatchPoint({"theta": 0.003 * i, "phi": 1.0 - 0.002 * i}, SHOTS, seed=10_000 + i)
        for i in range(count)
    ]
    values = [dict(p.values) for p in points]

    # Correctness first: every batched point's counts are its single job's.
    batched = backend.run_batch(template, points)
    for point, result in zip(points, batched, strict=True):
        single = backend.execute(Task(template.bind(point.values), SHOTS, seed=point.seed))
        assert result.counts == single.counts, "a batched point's counts differ"

    def batch() -> None:
        backend.run_batch(template, points)

    def one_at_a_time() -> None:
        for point in points:
            backend.execute(Task(template.bind(point.values), SHOTS, seed=point.seed))

    def interpreted() -> None:
        for point in points:
            backend.execute(Task(template._interpret(dict(point.values)), SHOTS, seed=point.seed))

    spec = JobSpec.new(circuit_text="", circuit_hash="", backend="statevector", shots=SHOTS)
    key = job_keys(spec, backend_config_hash=backend.info.config_hash)
    digests = [sha256_tag(b.text.encode()) for b in template.bind_many(values)]

    times: dict[str, list[float]] = {
        name: []
        for name in ("batch", "single", "interpreted", "bind", "canonical", "key", "interpret")
    }
    for _ in range(ROUNDS):
        times["batch"].append(cpu(batch))
        times["single"].append(cpu(one_at_a_time))
        times["interpreted"].append(cpu(interpreted))
        times["bind"].append(cpu(lambda: [template.bind(v) for v in values]))
        times["canonical"].append(cpu(lambda: template.bind_many(values)))
        times["key"].append(cpu(lambda: [key(digest) for digest in digests]))
        times["interpret"].append(cpu(lambda: [template._interpret(v) for v in values]))
    med = {name: statistics.median(t) for name, t in times.items()}
    per = {name: med[name] / count * 1e6 for name in med}

    print(
        f"{count} points, {QUBITS} qubits, 30 operations, {SHOTS} shots; CPU time, median of {ROUNDS}"
    )
    print(f"  batch (run_batch, binding included)  {per['batch']:8.1f} µs/point")
    print(f"  one at a time (bind + execute)       {per['single']:8.1f} µs/point")
    print(f"  one at a time, interpreter binding   {per['interpreted']:8.1f} µs/point")
    ratio = med["single"] / med["batch"]
    print(f"  batched vs one at a time: {ratio:.2f}x  (target >= 5)  {verdict(ratio >= 5)}")
    print(f"  batched vs interpreter-bound one at a time: {med['interpreted'] / med['batch']:.2f}x")
    print("binding per point:")
    print(f"  Template.bind (traced)               {per['bind']:8.1f} µs")
    print(f"  bind_many with canonical text        {per['canonical']:8.1f} µs")
    print(f"  job key (spec.job_keys)              {per['key']:8.1f} µs")
    print(f"  interpreter                          {per['interpret']:8.1f} µs")
    cheaper = med["interpret"] / med["bind"]
    print(
        f"  traced bind vs interpreter: {cheaper:.1f}x cheaper  (target >= 5)  {verdict(cheaper >= 5)}"
    )


if __name__ == "__main__":
    main()
