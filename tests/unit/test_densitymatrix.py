"""The density-matrix backend against textbook noise formulas, a brute-force reference,
and its own contracts (trace, positivity, seeds, limits).

Sources are named beside each check: Nielsen & Chuang, "Quantum Computation and Quantum
Information" (10th anniversary edition) chapter 8 for the channels; the brute-force
reference in test_densitymatrix_helpers.py (full matrices, Kraus sums: common practice);
scipy.stats.chisquare for counts.
"""

from __future__ import annotations

import math
import pickle

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from jobkeeper.backend import LocalBackend, Task
from jobkeeper.backends.sim import density_state
from jobkeeper.backends.sim.densitymatrix import DensityMatrixBackend, NoiseModel
from jobkeeper.backends.sim.gates import gate_matrix
from jobkeeper.backends.sim.statevector import StatevectorBackend
from jobkeeper.circuit.ir import Circuit
from jobkeeper.exceptions import PermanentBackendError
from tests.unit.test_densitymatrix_helpers import distribution, random_circuit, reference
from tests.unit.test_statevector_helpers import circuit, measure, op, tvd

TOL = 1e-12


def backend(**noise: object) -> DensityMatrixBackend:
    return DensityMatrixBackend(config={"adapter": "densitymatrix", **noise})


def exact(b: DensityMatrixBackend, circ: Circuit) -> dict[str, float]:
    result = b.execute(Task(circ, shots=0, seed=1, exact=True))
    assert result.probabilities is not None
    return dict(result.probabilities)


def bloch(rho: np.ndarray) -> np.ndarray:
    # r = (Tr ρX, Tr ρY, Tr ρZ) (N&C §4.2, exercise 4.10 / eq. 8.166 form).
    return np.array([2 * rho[0, 1].real, -2 * rho[0, 1].imag, (rho[0, 0] - rho[1, 1]).real])


# -- depolarizing ---------------------------------------------------------------------------


@pytest.mark.parametrize("p", [0.0, 0.01, 0.3, 0.75, 1.0])
def test_depolarizing_shrinks_the_bloch_vector_by_one_minus_four_thirds_p(p: float) -> None:
    # N&C §8.3.4: ρ → (1−p)ρ + p/3 (XρX + YρY + ZρZ) maps the Bloch vector r to
    # (1 − 4p/3) r. One extra `id` is one extra channel: compare with and without it.
    b = backend(depolarizing_1q=p)
    prep = [op("u3", 0, params=[1.1, 0.4, -0.3])]
    before = bloch(b.final_density_matrix(circuit(1, prep)))
    after = bloch(b.final_density_matrix(circuit(1, [*prep, op("id", 0)])))
    np.testing.assert_allclose(after, (1 - 4 * p / 3) * before, atol=TOL)


@pytest.mark.parametrize("p", [0.0, 0.02, 0.5])
def test_depolarized_x_reads_one_with_probability_one_minus_two_thirds_p(p: float) -> None:
    # N&C §8.3.4: after x, |1⟩ has Bloch z = −1, shrunk to −(1 − 4p/3), so
    # P(1) = (1 + (1 − 4p/3)) / 2 = 1 − 2p/3 (X and Y errors flip it back, Z does not).
    probs = exact(backend(depolarizing_1q=p), circuit(1, [op("x", 0), measure(0, 0)], [1]))
    assert probs.get("1", 0.0) == pytest.approx(1 - 2 * p / 3, abs=TOL)
    assert probs.get("0", 0.0) == pytest.approx(2 * p / 3, abs=TOL)


@pytest.mark.parametrize("p", [0.0, 0.005, 0.1, 0.6])
def test_bell_state_fidelity_under_two_qubit_depolarizing(p: float) -> None:
    # ρ = (1−p)|Φ+⟩⟨Φ+| + p/15 Σ_{P ∈ 15 non-identity two-qubit Paulis} P|Φ+⟩⟨Φ+|P.
    # ⟨Φ+|P|Φ+⟩ is ±1 for the Paulis that stabilise |Φ+⟩ up to sign, XX (+1), YY (−1),
    # ZZ (+1), and 0 for the other 12 (they map |Φ+⟩ to an orthogonal Bell state), so
    # F = ⟨Φ+|ρ|Φ+⟩ = 1 − p + 3p/15 = 1 − 12p/15 (N&C §8.3.4 definition, worked out here).
    b = backend(depolarizing_2q=p)
    rho = b.final_density_matrix(circuit(2, [op("h", 0), op("cx", 0, 1)]))
    phi = np.zeros(4, dtype=complex)
    phi[0] = phi[3] = 1 / math.sqrt(2)
    fidelity = float(np.real(phi.conj() @ rho @ phi))
    assert fidelity == pytest.approx(1 - 12 * p / 15, abs=TOL)


# -- readout --------------------------------------------------------------------------------


@pytest.mark.parametrize("e", [0.0, 0.013, 0.5, 1.0])
def test_readout_error_on_zero_reads_one_with_probability_e(e: float) -> None:
    # Definition of a symmetric readout (assignment) error: P(read 1 | state 0) = e.
    probs = exact(backend(readout_error=e), circuit(1, [measure(0, 0)], [1]))
    assert probs.get("1", 0.0) == pytest.approx(e, abs=TOL)
    assert probs.get("0", 0.0) == pytest.approx(1 - e, abs=TOL)


def test_readout_errors_per_qubit_multiply_on_a_product_state() -> None:
    # Independent flips on a product state: P(b1 b0) = P(b1) · P(b0) (common practice).
    e0, e1 = 0.02, 0.07
    b = backend(readout_error=[e0, e1])
    probs = exact(b, circuit(2, [op("x", 0), measure(0, 0), measure(1, 1)], [2]))
    p0 = {"1": 1 - e0, "0": e0}  # qubit 0 is in |1⟩
    p1 = {"1": e1, "0": 1 - e1}  # qubit 1 is in |0⟩
    expected = {b1 + b0: p1[b1] * p0[b0] for b1 in "01" for b0 in "01"}
    assert tvd(probs, expected) < TOL


def test_mid_circuit_readout_error_flips_the_record_not_the_qubit() -> None:
    # Measure |1⟩ mid-circuit with readout error e, then measure it again: the qubit
    # collapsed to the true outcome, so the second reading is wrong independently:
    # P(c1 c0) = P(c1) P(c0) with each reading 1 w.p. 1 − e (definition of the model).
    e = 0.1
    circ = circuit(1, [op("x", 0), measure(0, 0), measure(0, 1)], [2])
    probs = exact(backend(readout_error=e), circ)
    p = {"1": 1 - e, "0": e}
    assert tvd(probs, {a + c: p[a] * p[c] for a in "01" for c in "01"}) < TOL


# -- relaxation -----------------------------------------------------------------------------


@pytest.mark.parametrize("ids", [0, 1, 5])
def test_amplitude_damping_leaves_one_with_exp_minus_t_over_t1(ids: int) -> None:
    # N&C §8.3.5: amplitude damping with γ = 1 − exp(−t/T1) leaves |1⟩ populated with
    # 1 − γ = exp(−t/T1). Each gate lasts gate_time_1q: x and `ids` idle gates.
    t1, gate = 50e-6, 1e-6
    b = backend(t1=t1, gate_time_1q=gate, gate_time_2q=gate)
    ops = [op("x", 0)] + [op("id", 0)] * ids + [measure(0, 0)]
    probs = exact(b, circuit(1, ops, [1]))
    assert probs["1"] == pytest.approx(math.exp(-(ids + 1) * gate / t1), abs=TOL)


@pytest.mark.parametrize("t1", [None, 40e-6])
def test_coherence_of_plus_decays_with_exp_minus_t_over_t2(t1: float | None) -> None:
    # N&C §8.3.5-8.3.6 and the Bloch equations: transverse coherence decays as
    # exp(−t/T2) (T1 → ∞: pure dephasing alone); with T1 the population of |1⟩ decays
    # as exp(−t/T1) at the same time (1/T2 = 1/(2T1) + 1/Tφ).
    t2, gate, ids = 30e-6, 2e-6, 4
    noise: dict[str, object] = {"t2": t2, "gate_time_1q": gate, "gate_time_2q": gate}
    if t1 is not None:
        noise["t1"] = t1
    rho = backend(**noise).final_density_matrix(circuit(1, [op("h", 0)] + [op("id", 0)] * ids))
    t = (ids + 1) * gate
    assert abs(rho[0, 1]) == pytest.approx(0.5 * math.exp(-t / t2), abs=TOL)
    population = 0.5 * (math.exp(-t / t1) if t1 is not None else 1.0)
    assert rho[1, 1].real == pytest.approx(population, abs=TOL)


def test_two_qubit_gates_decay_for_their_own_duration() -> None:
    # Amplitude damping (N&C §8.3.5) on every qubit a gate acts on, for that gate's
    # duration: x on q1 (g1), then cx q1→q0 (g2 on both). Qubit 1 stays in |1⟩ with
    # exp(−(g1+g2)/T1); qubit 0 is flipped only if qubit 1 was still 1 (exp(−g1/T1))
    # and then decays during the cx (exp(−g2/T1)).
    t1, g1, g2 = 20e-6, 1e-7, 4e-7
    b = backend(t1=t1, gate_time_1q=g1, gate_time_2q=g2)
    circ = circuit(2, [op("x", 1), op("cx", 1, 0), measure(0, 0), measure(1, 1)], [2])
    probs = exact(b, circ)
    assert probs["11"] + probs.get("10", 0) == pytest.approx(math.exp(-(g1 + g2) / t1), abs=TOL)
    assert probs["11"] + probs.get("01", 0) == pytest.approx(math.exp(-(g1 + g2) / t1), abs=TOL)


# -- against the brute-force reference -----------------------------------------------------

NOISE = {
    "p1": 0.03,
    "p2": 0.08,
    "readout": [0.02, 0.05, 0.11],
    "t1": 30e-6,
    "t2": 25e-6,
    "time1": 1e-6,
    "time2": 3e-6,
}
CONFIG = {
    "depolarizing_1q": 0.03,
    "depolarizing_2q": 0.08,
    "readout_error": [0.02, 0.05, 0.11],
    "t1": 30e-6,
    "t2": 25e-6,
    "gate_time_1q": 1e-6,
    "gate_time_2q": 3e-6,
}


@pytest.mark.parametrize("seed", range(12))
def test_random_noisy_circuits_match_the_brute_force_reference(seed: int) -> None:
    # Reference: Kraus sums with full matrices per classical record (helpers; N&C ch. 8).
    circ = random_circuit(np.random.default_rng(seed))
    expected = distribution(circ, reference(circ, gate_matrix, **NOISE))  # type: ignore[arg-type]
    assert tvd(exact(backend(**CONFIG), circ), expected) < 1e-10


def test_a_toffoli_under_noise_runs_as_its_definition() -> None:
    # The published ccx body (6 cx, 9 single-qubit gates) with each gate's noise; the
    # reference expands it the same way (documented decision, checked end to end).
    circ = circuit(
        3, [op("x", 0), op("x", 1), op("ccx", 0, 1, 2)] + [measure(q, q) for q in range(3)], [3]
    )
    expected = distribution(circ, reference(circ, gate_matrix, p1=0.01, p2=0.04))
    probs = exact(backend(depolarizing_1q=0.01, depolarizing_2q=0.04), circ)
    assert tvd(probs, expected) < 1e-10
    assert probs["111"] < 1 - 6 * 0.04 * 0.5  # far noisier than one two-qubit gate


# -- trace and positivity -------------------------------------------------------------------


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), p1=st.floats(0, 1), p2=st.floats(0, 1), e=st.floats(0, 1))
def test_every_record_stays_positive_and_the_records_sum_to_trace_one(
    seed: int, p1: float, p2: float, e: float
) -> None:
    # A channel is completely positive and trace preserving (N&C §8.2.3); splitting by
    # measurement records partitions the trace.
    b = backend(
        depolarizing_1q=p1, depolarizing_2q=p2, readout_error=e, t1=10e-6, t2=15e-6,
        gate_time_1q=1e-6, gate_time_2q=2e-6,
    )  # fmt: skip
    circ = random_circuit(np.random.default_rng(seed), length=10)
    program = b.compile(circ)
    records = b.evolve(program)
    total = 0.0
    for rho in records.values():
        matrix = density_state.as_matrix(rho, circ.num_qubits)
        np.testing.assert_allclose(matrix, matrix.conj().T, atol=1e-12)
        assert np.linalg.eigvalsh(matrix).min() >= -1e-12
        total += float(np.trace(matrix).real)
    # Records below 1e-12 are not followed (as in the state-vector backend): each drop
    # loses at most that much of the trace.
    assert total == pytest.approx(1.0, abs=1e-9)


# -- sampling -------------------------------------------------------------------------------


def test_same_seed_same_counts_and_other_seeds_differ() -> None:
    b = backend(**CONFIG)
    circ = random_circuit(np.random.default_rng(3))
    first = b.execute(Task(circ, 5000, seed=42)).counts
    assert b.execute(Task(circ, 5000, seed=42)).counts == first
    assert b.execute(Task(circ, 5000, seed=43)).counts != first
    assert b.info.deterministic


def test_counts_are_consistent_with_the_exact_distribution() -> None:
    # scipy.stats.chisquare, α = 0.001, fixed seed (a failure would be a 1-in-1000 event
    # for a correct sampler; the seed makes it reproducible either way).
    b = backend(**CONFIG)
    circ = random_circuit(np.random.default_rng(5))
    shots = 40_000
    result = b.execute(Task(circ, shots, seed=2024, exact=True))
    assert result.counts is not None and result.probabilities is not None
    keys = sorted(k for k, p in result.probabilities.items() if p * shots >= 5)
    observed = np.array([result.counts.get(k, 0) for k in keys], dtype=float)
    expected = np.array([result.probabilities[k] for k in keys]) * shots
    expected *= observed.sum() / expected.sum()  # the pooled tail is left out of both
    assert stats.chisquare(observed, expected).pvalue > 0.001


def test_counts_are_the_documented_draw_from_the_exact_distribution() -> None:
    # The state-vector backend's documented method (jobkeeper.backends.sim.sampling): one
    # multinomial over the outcomes in ascending index order (bit j = the j-th smallest
    # classical bit), probabilities normalised and rounded to 13 decimal places,
    # numpy.random.Generator(PCG64(seed)). Redone here by hand.
    b = backend(**CONFIG)
    ops = [op("h", 0), op("cx", 0, 1), op("u3", 2, params=[0.7, 0.1, 0.2])]
    circ = circuit(3, [*ops, measure(0, 0), measure(1, 1), measure(2, 2)], [3])
    result = b.execute(Task(circ, 10_000, seed=77, exact=True))
    assert result.probabilities is not None and len(result.probabilities) == 8
    probs = np.array([result.probabilities[format(i, "03b")] for i in range(8)])
    rounded = np.round(probs / probs.sum(), 13)
    drawn = np.random.Generator(np.random.PCG64(77)).multinomial(10_000, rounded / rounded.sum())
    assert result.counts == {format(i, "03b"): int(k) for i, k in enumerate(drawn) if k}


@pytest.mark.parametrize("seed", [0, 7, 11])
def test_noiseless_counts_equal_the_state_vector_backends_for_the_same_seed(seed: int) -> None:
    # The same documented draw over the same distribution (equal to rounding, which the
    # draw's rounding to 13 places absorbs) gives the same counts, records and all.
    circ = random_circuit(np.random.default_rng(seed), wide=False)
    task = Task(circ, 3000, seed=99)
    assert backend().execute(task).counts == StatevectorBackend().execute(task).counts


def test_a_circuit_without_measurements_reports_all_zero_bits() -> None:
    # Same convention as the state-vector backend: classical bits start at 0.
    circ = circuit(2, [op("h", 0)], [2])
    result = backend(readout_error=0.2).execute(Task(circ, 10, seed=1))
    assert result.counts == {"00": 10}
    assert result.metadata["measured"] is False


# -- limits and the protocol ----------------------------------------------------------------


def test_more_qubits_than_the_limit_are_refused_before_allocating(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    def no_allocation(n: int) -> np.ndarray:
        raise AssertionError("allocated before checking the limit")

    monkeypatch.setattr(density_state, "initial_density", no_allocation)
    circ = circuit(13, [op("h", 0), measure(0, 0)], [1])
    with pytest.raises(PermanentBackendError) as info:
        backend().execute(Task(circ, 10, seed=1))
    message = str(info.value)
    assert "13 qubits" in message and "max_qubits (12)" in message
    assert str(4**13 * 16) in message  # the bytes a 13-qubit density matrix needs
    with pytest.raises(PermanentBackendError, match="4 qubits exceed"):
        backend(max_qubits=3).execute(Task(circuit(4, [op("h", 3)]), 1, seed=1))


def test_per_qubit_lists_bound_the_qubits() -> None:
    b = backend(readout_error=[0.01, 0.02, 0.03])
    assert b.info.max_qubits == 3
    with pytest.raises(PermanentBackendError, match="4 qubits exceed"):
        b.execute(Task(circuit(4, [op("h", 3)]), 1, seed=1))


def test_unknown_and_opaque_gates_are_refused_with_their_name() -> None:
    circ = circuit(2, [op("magic", 0, 1)], opaque=["magic"])
    with pytest.raises(PermanentBackendError, match="magic"):
        backend(depolarizing_2q=0.01).execute(Task(circ, 1, seed=1))


def test_the_backend_is_a_picklable_local_backend() -> None:
    b = backend(**CONFIG, pricing={"per_task": 1.0, "per_shot": 0.01, "currency": "credits"})
    assert isinstance(b, LocalBackend)
    clone = pickle.loads(pickle.dumps(b))
    circ = random_circuit(np.random.default_rng(1))
    task = Task(circ, 100, seed=5)
    assert clone.execute(task).counts == b.execute(task).counts
    assert clone.info == b.info
    assert b.info.kind == "simulator"


def test_noise_model_constructor_equals_configuration() -> None:
    model = NoiseModel(depolarizing_1q=0.01, readout_error=(0.1, 0.2))
    direct = DensityMatrixBackend(noise=model)
    assert direct.noise == backend(depolarizing_1q=0.01, readout_error=[0.1, 0.2]).noise
    assert direct.info.calibration == {
        "depolarizing_1q": 0.01,
        "depolarizing_2q": 0.0,
        "readout_error": [0.1, 0.2],
    }


def test_too_many_live_records_are_refused() -> None:
    # Three mid-circuit measurements of |+⟩ into three bits make 8 live records (the
    # x after each makes them mid-circuit rather than final).
    ops = [op("h", q) for q in range(3)] + [measure(q, q) for q in range(3)]
    ops += [op("x", q) for q in range(3)]
    circ = circuit(3, ops, [3])
    assert backend(max_branches=8).execute(Task(circ, 10, seed=1)).counts
    with pytest.raises(PermanentBackendError, match="more than 4 classical records"):
        backend(max_branches=4).execute(Task(circ, 10, seed=1))


def test_metadata_counts_a_noisy_toffoli_as_its_decomposition() -> None:
    circ = circuit(3, [op("h", 0), op("ccx", 0, 1, 2), measure(2, 0)], [1])
    noisy = backend(depolarizing_2q=0.01).execute(Task(circ, 10, seed=1)).metadata
    assert noisy["operations"] == {"1q": 10, "2q": 6, "wider": 0}
    clean = backend().execute(Task(circ, 10, seed=1)).metadata
    assert clean["operations"] == {"1q": 1, "2q": 0, "wider": 1}
    assert noisy["noise"] == {"depolarizing_1q": 0.0, "depolarizing_2q": 0.01, "readout_error": 0.0}
