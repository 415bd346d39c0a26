"""The state-vector backend: textbook circuits, the Backend protocol, seeds, bit
strings, refusals.

Each check against an outside value names its source: Nielsen & Chuang, "Quantum
Computation and Quantum Information" (10th anniversary ed.) for the textbook circuits;
the OpenQASM 2.0 specification (arXiv:1707.03429) for bit-string order; scipy.stats for
goodness of fit.
"""

from __future__ import annotations

import asyncio
import json
import pickle
import subprocess
import sys
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from jobkeeper.backend import LocalBackend, Task
from jobkeeper.backends import create_backend
from jobkeeper.backends.sim.sampling import draw
from jobkeeper.backends.sim.statevector import StatevectorBackend, from_config
from jobkeeper.circuit.ir import Operation, Register
from jobkeeper.exceptions import ConfigError, PermanentBackendError
from jobkeeper.hashing import digest_of
from tests.unit.test_statevector_helpers import circuit, exact, measure, op, tvd

TOL = 1e-9


def qft_ops(n: int, inverse: bool = False) -> list:
    """The QFT circuit of N&C figure 5.1 with q[n-1] as the most significant qubit:
    Hadamard then controlled R_k = diag(1, e^{2πi/2^k}), then the reversing swaps."""
    ops = []
    for i in reversed(range(n)):
        ops.append(op("h", i))
        for m in reversed(range(i)):
            ops.append(op("cu1", m, i, params=[np.pi / 2 ** (i - m)]))
    ops += [op("swap", i, n - 1 - i) for i in range(n // 2)]
    if not inverse:
        return ops
    return [op(o.name, *o.qubits, params=[-p for p in o.params]) for o in reversed(ops)]


def basis_prep(n: int, j: int) -> list:
    return [op("x", q) for q in range(n) if (j >> q) & 1]


def test_bell_state() -> None:
    # N&C section 1.3.6: (|00⟩ + |11⟩)/√2 measures 00 or 11, each with probability 1/2.
    circ = circuit(2, [op("h", 0), op("cx", 0, 1), measure(0, 0), measure(1, 1)], [2])
    assert tvd(exact(circ), {"00": 0.5, "11": 0.5}) < TOL


def test_ghz_state() -> None:
    # N&C exercise 4.33 / common practice: GHZ on 5 qubits gives 00000 or 11111 only.
    ops = [op("h", 0)] + [op("cx", 0, q) for q in range(1, 5)] + [measure(q, q) for q in range(5)]
    assert tvd(exact(circuit(5, ops, [5])), {"00000": 0.5, "11111": 0.5}) < TOL


def test_bernstein_vazirani_reads_the_secret_in_one_query() -> None:
    # Bernstein & Vazirani (1997); N&C exercise 1.1-style oracle f(x) = s·x mod 2.
    n, secret = 6, 0b101101
    ops = [op("x", n)] + [op("h", q) for q in range(n + 1)]
    ops += [op("cx", q, n) for q in range(n) if (secret >> q) & 1]
    ops += [op("h", q) for q in range(n)] + [measure(q, q) for q in range(n)]
    assert exact(circuit(n + 1, ops, [n])) == pytest.approx({format(secret, "06b"): 1.0})


@pytest.mark.parametrize("j", [0, 1, 6, 11])
def test_qft_of_a_basis_state_has_the_textbook_amplitudes(j: int) -> None:
    # N&C eq. 5.2: QFT|j⟩ = 2^{-n/2} Σ_k e^{2πi jk/2^n} |k⟩.
    n = 4
    state = StatevectorBackend().final_state(circuit(n, basis_prep(n, j) + qft_ops(n)))
    k = np.arange(1 << n)
    expected = np.exp(2j * np.pi * j * k / (1 << n)) / np.sqrt(1 << n)
    assert np.allclose(state, expected, atol=1e-12)


def test_qft_then_inverse_returns_the_basis_state() -> None:
    # N&C section 5.1: the QFT is unitary; measured, QFT|j⟩ is uniform.
    n, j = 5, 0b10110
    ops = basis_prep(n, j) + qft_ops(n)
    uniform = exact(circuit(n, ops + [measure(q, q) for q in range(n)], [n]))
    assert tvd(uniform, {format(k, "05b"): 1 / 32 for k in range(32)}) < TOL
    roundtrip = ops + qft_ops(n, inverse=True) + [measure(q, q) for q in range(n)]
    assert tvd(exact(circuit(n, roundtrip, [n])), {format(j, "05b"): 1.0}) < TOL


def _ccz(a: int, b: int, c: int) -> list:
    return [op("h", c), op("ccx", a, b, c), op("h", c)]


def test_grover_three_qubits_two_iterations() -> None:
    # N&C section 6.1.3: after r iterations P(marked) = sin²((2r+1)θ), sin θ = √(M/N);
    # N = 8, M = 1, r = 2: sin²(5θ) = 121/128.
    marked = 0b101
    flips = [op("x", q) for q in range(3) if not (marked >> q) & 1]
    oracle = flips + _ccz(0, 1, 2) + flips
    hs, xs = [op("h", q) for q in range(3)], [op("x", q) for q in range(3)]
    diffusion = hs + xs + _ccz(0, 1, 2) + xs + hs
    ops = hs + (oracle + diffusion) * 2 + [measure(q, q) for q in range(3)]
    probs = exact(circuit(3, ops, [3]))
    assert probs["101"] == pytest.approx(121 / 128, abs=1e-12)
    theta = np.arcsin(1 / np.sqrt(8))
    assert probs["101"] == pytest.approx(np.sin(5 * theta) ** 2, abs=1e-12)
    assert sum(probs.values()) == pytest.approx(1.0, abs=1e-12)


def test_counts_are_one_documented_multinomial_draw() -> None:
    # The documented method (see sampling): one multinomial over the final outcomes in
    # ascending index order (bit j = the j-th smallest measured classical bit), PCG64(seed),
    # probabilities normalised and rounded to 13 decimals.
    ops = [op("ry", 0, params=[1.1]), op("ry", 1, params=[0.4]), op("cx", 0, 1)]
    circ = circuit(2, [*ops, measure(0, 0), measure(1, 1)], [2])
    probs = exact(circ)
    p = np.array([probs.get(format(i, "02b"), 0.0) for i in range(4)])
    rounded = np.round(p / p.sum(), 13)
    drawn = np.random.Generator(np.random.PCG64(2024)).multinomial(10_000, rounded / rounded.sum())
    expected = {format(i, "02b"): int(c) for i, c in enumerate(drawn) if c}
    assert StatevectorBackend().execute(Task(circ, 10_000, seed=2024)).counts == expected


def test_counts_do_not_depend_on_rounding_noise() -> None:
    # Last-bit differences (other BLAS builds, kernels or simulators) must not change the
    # counts, even at p = 1/2 where numpy's binomial switches branches.
    half = np.array([0.5, 0.5])
    noisy = np.array([np.nextafter(0.5, 1.0), np.nextafter(0.5, 0.0)])
    for seed in range(20):
        a = draw(np.random.Generator(np.random.PCG64(seed)), 3001, half)
        b = draw(np.random.Generator(np.random.PCG64(seed)), 3001, noisy)
        assert a.tolist() == b.tolist()


def test_counts_fit_the_exact_distribution() -> None:
    # scipy.stats.chisquare goodness of fit, α = 1e-3, fixed seed (deterministic).
    rng = np.random.default_rng(7)
    ops = []
    for _ in range(3):
        ops += [op("u3", q, params=rng.uniform(0, np.pi, 3)) for q in range(5)]
        ops += [op("cx", q, q + 1) for q in range(4)]
    circ = circuit(5, ops + [measure(q, q) for q in range(5)], [5])
    result = StatevectorBackend().execute(Task(circ, 50_000, seed=99, exact=True))
    assert result.counts is not None and result.probabilities is not None
    keys = sorted(result.probabilities)
    observed = np.array([result.counts.get(k, 0) for k in keys])
    expected = np.array([result.probabilities[k] for k in keys]) * 50_000
    expected *= observed.sum() / expected.sum()
    assert stats.chisquare(observed, expected).pvalue > 1e-3
    assert set(result.counts) <= set(keys)


def test_count_keys_follow_the_register_layout() -> None:
    # DESIGN (count keys): registers in declaration order, the first declared leftmost,
    # joined by "|"; each register's value in binary, highest index leftmost.
    ops = [op("x", 0), op("x", 2), measure(0, 0), measure(1, 1), measure(2, 2)]
    circ = circuit(3, ops, [2, 1])  # c0 = bits 0,1 (value 01); c1 = bit 2 (value 1)
    assert StatevectorBackend().execute(Task(circ, 5, seed=1)).counts == {"01|1": 5}
    # Bits written out of qubit order, one qubit left unmeasured.
    ops = [op("x", 0), op("h", 1), measure(2, 0), measure(0, 1)]
    result = StatevectorBackend().execute(Task(circuit(3, ops, [2]), 5, seed=1, exact=True))
    assert result.counts == {"10": 5}
    assert result.probabilities == pytest.approx({"10": 1.0})


def test_a_circuit_without_measurement_reads_all_zeros() -> None:
    circ = circuit(2, [op("h", 0), op("cx", 0, 1)], [2, 1])
    result = StatevectorBackend().execute(Task(circ, 7, seed=3, exact=True))
    assert result.counts == {"00|0": 7}
    assert result.probabilities == pytest.approx({"00|0": 1.0}, abs=1e-12)
    assert result.metadata["measured"] is False and "note" in result.metadata


def test_metadata_and_seed_choice() -> None:
    circ = circuit(1, [op("h", 0), measure(0, 0)], [1])
    backend = StatevectorBackend()
    first = backend.execute(Task(circ, 1000, seed=None))
    seed = first.metadata["seed"]
    assert isinstance(seed, str) and int(seed) >= 0
    again = backend.execute(Task(circ, 1000, seed=int(seed)))
    assert again.counts == first.counts
    for key in ("method", "numpy_version", "shots", "branches"):
        assert key in first.metadata
    assert first.metadata["numpy_version"] == np.__version__


_SUBPROCESS = """
import json, sys
from jobkeeper.backend import Task
from jobkeeper.backends.sim.statevector import StatevectorBackend
from tests.unit.test_statevector import seeded_circuit
result = StatevectorBackend().execute(Task(seeded_circuit(), 4000, seed=int(sys.argv[1])))
print(json.dumps(result.counts, sort_keys=True))
"""


def seeded_circuit():  # type: ignore[no-untyped-def]
    ops = [op("h", q) for q in range(4)] + [op("cx", 0, 3), op("rz", 2, params=[0.3])]
    return circuit(4, ops + [measure(q, q) for q in range(4)], [4])


def test_same_seed_same_counts_in_another_process() -> None:
    # Reproducibility across processes (common practice for seeded generators).
    run = subprocess.run(
        [sys.executable, "-c", _SUBPROCESS, "12345"],
        capture_output=True,
        text=True,
        check=True,
        cwd=Path(__file__).resolve().parents[2],
    )
    here = StatevectorBackend().execute(Task(seeded_circuit(), 4000, seed=12345)).counts
    assert json.loads(run.stdout) == dict(sorted(here.items()))
    other = StatevectorBackend().execute(Task(seeded_circuit(), 4000, seed=12346)).counts
    assert other != here


def test_backend_protocol_info_registry_and_pickling() -> None:
    config = {"adapter": "statevector", "max_qubits": 20}
    backend = from_config("sv", config)
    assert isinstance(backend, LocalBackend)
    info = backend.info
    assert info.name == "sv" and info.kind == "simulator" and info.deterministic
    assert info.max_qubits <= 20 and info.config_hash == digest_of(config)
    assert "sv" in info.version
    assert isinstance(create_backend("statevector"), StatevectorBackend)
    clone = pickle.loads(pickle.dumps(backend))
    circ = circuit(1, [op("x", 0), measure(0, 0)], [1])
    started = asyncio.run(clone.start(Task(circ, 3, seed=1), client_key="k"))
    assert started.result is not None and started.result.counts == {"1": 3}
    with pytest.raises(PermanentBackendError, match="no handle"):
        asyncio.run(clone.poll("h"))
    with pytest.raises(PermanentBackendError):
        asyncio.run(clone.cancel("h"))
    asyncio.run(clone.aclose())
    with pytest.raises(ConfigError, match="unknown option"):
        from_config("sv", {"adapter": "statevector", "max_qbits": 3})


def test_memory_refusal_names_qubits_and_bytes_before_allocating() -> None:
    backend = StatevectorBackend(config={"max_qubits": 64, "max_memory_bytes": 1 << 20})
    circ = circuit(22, [op("h", 0), measure(0, 0)], [1])
    tracemalloc.start()
    try:
        with pytest.raises(PermanentBackendError, match=r"22 qubits need 134217728 bytes"):
            backend.execute(Task(circ, 10, seed=1))
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 1 << 20  # the 64 MiB state was never allocated
    huge = circuit(45, [measure(0, 0)], [1])
    with pytest.raises(PermanentBackendError, match="45 qubits need"):
        backend.execute(Task(huge, 1, seed=1))
    with pytest.raises(PermanentBackendError, match="max_qubits"):
        StatevectorBackend(config={"max_qubits": 4}).execute(Task(circuit(5, []), 1))


def test_opaque_and_malformed_operations_are_refused() -> None:
    circ = circuit(2, [op("foo", 0, 1), measure(0, 0)], [1], opaque=["foo"])
    with pytest.raises(PermanentBackendError, match="opaque gate 'foo' cannot be simulated"):
        StatevectorBackend().execute(Task(circ, 1))
    for bad in (op("cx", 0, 0), op("rx", 0), op("nosuchgate", 0), op("h", 5)):
        with pytest.raises(PermanentBackendError):
            StatevectorBackend().execute(Task(circuit(2, [bad]), 1))
    with pytest.raises(PermanentBackendError, match="shots"):
        StatevectorBackend().execute(Task(circuit(1, []), -1))
    with pytest.raises(PermanentBackendError, match="seed"):
        StatevectorBackend().execute(Task(circuit(1, []), 1, seed=-5))


@settings(max_examples=200, deadline=None)
@given(
    st.lists(st.integers(1, 5), min_size=1, max_size=4),
    st.data(),
)
def test_bit_strings_of_few_and_many_outcomes_agree(sizes: list[int], data: st.DataObject) -> None:
    # Two ways to write bit strings (one by one, and vectorised for many outcomes): both
    # must follow the OpenQASM 2 convention the same way for any registers and any set of
    # finally measured bits (the record supplies the others).
    from jobkeeper.backends.sim import sampling

    cregs, offset = [], 0
    for k, size in enumerate(sizes):
        cregs.append(Register(f"c{k}", size, offset))
        offset += size
    final = data.draw(st.lists(st.sampled_from(range(offset)), unique=True, max_size=offset))
    record = data.draw(st.integers(0, (1 << offset) - 1))
    formatter = sampling.BitFormatter(cregs, offset, sorted(final))
    outcomes = np.arange(1 << len(final), dtype=np.int64)
    one_by_one = [formatter._one(record, int(o)) for o in outcomes]
    saved = sampling.SMALL_FORMAT
    try:
        sampling.SMALL_FORMAT = -1
        assert formatter.format(record, outcomes) == one_by_one
    finally:
        sampling.SMALL_FORMAT = saved


def test_which_jobs_the_workerruns_inline() -> None:
    # Inline runs are for circuits the backend declares quick (common practice: keep the
    # event loop free of long work); a backend without the attribute never runs inline.
    from jobkeeper._execution import INLINE_OPERATIONS, runs_inline

    def finals(n: int) -> list[Operation]:
        return [measure(q, q) for q in range(n)]

    backend = StatevectorBackend()
    small = circuit(2, [op("h", 0), op("cx", 0, 1), *finals(2)], [2])
    assert runs_inline(Task(small, 10), backend)
    wide = circuit(9, [op("h", 0), *finals(9)], [9])
    assert not runs_inline(Task(wide, 10), backend)
    long = circuit(2, [op("h", 0)] * (INLINE_OPERATIONS + 1))
    assert not runs_inline(Task(long, 10), backend)
    branching = circuit(2, [op("h", 0), *finals(2), *finals(2)], [2])
    assert not runs_inline(Task(branching, 10), backend)

    class Plain:
        def execute(self, task: Task) -> object:
            raise AssertionError

    assert not runs_inline(Task(small, 10), Plain())  # type: ignore[arg-type]
