"""Random Clifford circuits against an independent stabilizer simulator (stim, from the
package registry): stim's samples must fit our exact distribution (scipy.stats
chisquare, α = 1e-3, fixed seeds so the test is deterministic) and never land on an
outcome we give probability zero."""

from __future__ import annotations

import numpy as np
import pytest
import stim
from scipy import stats

from jobkeeper.circuit.ir import Operation
from tests.unit.test_statevector_helpers import circuit, exact, measure, op

SHOTS = 20_000
ALPHA = 1e-3
_ONE = {"h": "H", "s": "S", "sdg": "S_DAG", "x": "X", "y": "Y", "z": "Z"}
_TWO = {"cx": "CX", "cz": "CZ", "swap": "SWAP"}


def random_clifford(
    rng: np.random.Generator, n: int, length: int
) -> tuple[list[Operation], str, int]:
    """Our operations, the same circuit in stim's language, and the number of bits.
    Resets and measurements (some mid-circuit); each measurement writes a fresh
    classical bit, in order."""
    ops: list[Operation] = []
    lines: list[str] = []
    bit = 0
    for _ in range(length):
        roll = rng.random()
        if roll < 0.5:
            name = str(rng.choice(sorted(_ONE)))
            q = int(rng.integers(n))
            ops.append(op(name, q))
            lines.append(f"{_ONE[name]} {q}")
        elif roll < 0.9:
            name = str(rng.choice(sorted(_TWO)))
            a, b = (int(x) for x in rng.choice(n, 2, replace=False))
            ops.append(op(name, a, b))
            lines.append(f"{_TWO[name]} {a} {b}")
        elif roll < 0.95:
            q = int(rng.integers(n))
            ops.append(op("reset", q))
            lines.append(f"R {q}")
        elif bit < 4:
            q = int(rng.integers(n))
            ops.append(measure(q, bit))
            lines.append(f"M {q}")
            bit += 1
    for q in range(n):
        ops.append(measure(q, bit))
        lines.append(f"M {q}")
        bit += 1
    return ops, "\n".join(lines), bit


@pytest.mark.parametrize("seed", range(8))
def test_random_clifford_circuit_agrees_with_stim(seed: int) -> None:
    rng = np.random.default_rng(seed)
    n = 5
    ops, program, bits = random_clifford(rng, n, 40)
    ours = exact(circuit(n, ops, [bits]))
    sampler = stim.Circuit(program).compile_sampler(seed=1000 + seed)
    samples = sampler.sample(SHOTS).astype(np.uint8)  # column j = j-th measurement
    # Our bit strings have bit 0 rightmost.
    keys = ["".join(map(str, row[::-1])) for row in samples]
    observed: dict[str, int] = {}
    for key in keys:
        observed[key] = observed.get(key, 0) + 1
    assert set(observed) <= set(ours), "stim sampled an outcome of probability zero"
    support = sorted(ours)
    # A stabilizer distribution is uniform over its support.
    assert np.allclose([ours[k] for k in support], 1 / len(support), atol=1e-9)
    counts = np.array([observed.get(k, 0) for k in support])
    if len(support) > 1:
        expected = np.array([ours[k] for k in support]) * SHOTS
        assert stats.chisquare(counts, expected * counts.sum() / expected.sum()).pvalue > ALPHA
