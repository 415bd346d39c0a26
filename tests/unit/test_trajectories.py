"""The trajectory backend against closed forms and against the density-matrix backend's
exact distributions.

Sources, named beside each check: Nielsen & Chuang, "Quantum Computation and Quantum
Information" (10th anniversary edition) §8.3 for the channels; Dalibard, Castin &
Mølmer, Phys. Rev. Lett. 68, 580 (1992) for quantum jumps (the method, whose samples must
follow the channel's distribution); scipy.stats.chisquare and scipy.stats.binom for the
statistics. Every statistical check is seeded and states its tolerance.
"""

from __future__ import annotations

import math
import pickle
from typing import Any

import numpy as np
import pytest
from scipy import stats

from jobkeeper.backend import LocalBackend, Task
from jobkeeper.backends import create_backend
from jobkeeper.backends.sim.densitymatrix import DensityMatrixBackend
from jobkeeper.backends.sim.trajectories import TrajectoryBackend, share_shots
from jobkeeper.circuit.ir import Circuit
from jobkeeper.exceptions import ConfigError, PermanentBackendError
from tests.unit.test_densitymatrix_helpers import random_circuit
from tests.unit.test_statevector_helpers import circuit, measure, op

SHOTS = 4000


def pair(**noise: Any) -> tuple[TrajectoryBackend, DensityMatrixBackend]:
    traj = TrajectoryBackend(config={"adapter": "trajectories", "trajectories": 10**6, **noise})
    dens = DensityMatrixBackend(config={"adapter": "densitymatrix", **noise})
    return traj, dens


def sampled(
    b: TrajectoryBackend, circ: Circuit, shots: int = SHOTS, seed: int = 11
) -> dict[str, int]:
    result = b.execute(Task(circ, shots=shots, seed=seed))
    assert result.counts is not None
    return dict(result.counts)


def exact(b: DensityMatrixBackend, circ: Circuit) -> dict[str, float]:
    result = b.execute(Task(circ, shots=0, seed=1, exact=True))
    assert result.probabilities is not None
    return dict(result.probabilities)


def within_binomial(hits: int, shots: int, p: float) -> bool:
    # Two-sided 4.5σ of Binomial(shots, p): a false alarm about once in 150,000 runs.
    return abs(hits - shots * p) <= 4.5 * math.sqrt(shots * p * (1 - p)) + 1


# -- closed forms -----------------------------------------------------------------------


@pytest.mark.parametrize("k", [1, 5, 20])
def test_excited_qubit_decays_over_idle_gates_as_exp_minus_k_d_over_t1(k: int) -> None:
    # Amplitude damping over time t: P(1) = e^{−t/T1} (N&C §8.3.5, γ = 1 − e^{−t/T1}).
    # |1⟩ then k `id` gates of duration d: P(1) = e^{−k·d/T1}.
    t1, d = 1e-6, 5e-8
    traj, dens = pair(t1=t1, gate_time_1q=0.0, gate_time_2q=0.0, gate_time_id=d)
    circ = circuit(1, [op("x", 0), *[op("id", 0)] * k, measure(0, 0)], [1])
    expected = math.exp(-k * d / t1)
    assert exact(dens, circ)["1"] == pytest.approx(expected, rel=1e-12)
    assert within_binomial(sampled(traj, circ).get("1", 0), SHOTS, expected)


@pytest.mark.parametrize("p", [0.05, 0.3, 0.9])
def test_bell_pair_under_two_qubit_depolarizing_has_odd_parity_8p_over_15(p: float) -> None:
    # Two-qubit depolarizing: one of the 15 non-identity Pauli products with probability
    # p/15 each (N&C §8.3.4, generalised). Of the 15, the 8 with X or Y on exactly one
    # qubit flip the parity of (|00⟩ + |11⟩)/√2: P(01) + P(10) = 8p/15.
    traj, dens = pair(depolarizing_2q=p)
    circ = circuit(2, [op("h", 0), op("cx", 0, 1), measure(0, 0), measure(1, 1)], [2])
    probs = exact(dens, circ)
    assert probs.get("01", 0.0) + probs.get("10", 0.0) == pytest.approx(8 * p / 15, rel=1e-12)
    counts = sampled(traj, circ)
    assert within_binomial(counts.get("01", 0) + counts.get("10", 0), SHOTS, 8 * p / 15)


@pytest.mark.parametrize("k", [2, 10])
def test_dephased_plus_state_reads_plus_with_half_one_plus_exp_minus_t_over_t2(k: int) -> None:
    # Pure dephasing over t with T2' (no T1: T2' = T2): coherence falls by e^{−t/T2'}
    # (N&C §8.3.6), so after the basis change back P(+) = (1 + e^{−t/T2'})/2.
    t2, d = 1e-6, 1e-7
    traj, dens = pair(t2=t2, gate_time_1q=0.0, gate_time_2q=0.0, gate_time_id=d)
    circ = circuit(1, [op("h", 0), *[op("id", 0)] * k, op("h", 0), measure(0, 0)], [1])
    expected = (1 + math.exp(-k * d / t2)) / 2
    assert exact(dens, circ)["0"] == pytest.approx(expected, rel=1e-12)
    assert within_binomial(sampled(traj, circ).get("0", 0), SHOTS, expected)


def test_a_qubit_decays_while_it_is_read() -> None:
    # Amplitude damping over the readout time r (N&C §8.3.5): |1⟩ reads 1 with e^{−r/T1}.
    t1, r = 1e-6, 4e-7
    traj, dens = pair(t1=t1, gate_time_1q=0.0, gate_time_2q=0.0, gate_time_readout=r)
    circ = circuit(1, [op("x", 0), measure(0, 0)], [1])
    assert exact(dens, circ)["1"] == pytest.approx(math.exp(-r / t1), rel=1e-12)
    assert within_binomial(sampled(traj, circ).get("1", 0), SHOTS, math.exp(-r / t1))


# -- against the density matrix ---------------------------------------------------------

ALL_CHANNELS: dict[str, Any] = {
    "depolarizing_1q": 0.03,
    "depolarizing_2q": 0.08,
    "readout_error": 0.04,
    "t1": 2e-6,
    "t2": 1.5e-6,
    "gate_time_1q": 5e-8,
    "gate_time_2q": 2e-7,
    "gate_time_id": 1e-7,
    "gate_time_readout": 3e-7,
}
SEEDS = 100
ALPHA = 0.01
CHI_SHOTS = 200


def chisquare_pvalue(counts: dict[str, int], probs: dict[str, float], shots: int) -> float:
    """Pearson's chi-square (scipy.stats.chisquare) with outcomes whose expected count
    is below 5 pooled into one bin (Cochran's rule, common practice)."""
    assert set(counts) <= {k for k, p in probs.items() if p > 0}, "an impossible outcome"
    big = sorted(k for k, p in probs.items() if p * shots >= 5)
    observed = [counts.get(k, 0) for k in big]
    expected = [probs[k] * shots for k in big]
    rest = shots - sum(expected)
    if rest >= 5 or not big:
        observed.append(shots - sum(observed))
        expected.append(rest)
    else:  # too little left to stand alone: fold it into the smallest bin
        i = int(np.argmin(expected))
        observed[i] += shots - sum(observed)
        expected[i] += rest
    if len(expected) < 2:
        return 1.0
    return float(stats.chisquare(observed, expected).pvalue)


def test_samples_pass_chisquare_against_exact_distributions_at_a_calibrated_rate() -> None:
    # 100 random circuits on 4–10 qubits (gates on one to three qubits, mid-circuit
    # measurements, resets and ifs) under every channel kind, one shot per trajectory;
    # each sample tested against the density matrix's exact distribution at α = 0.01.
    # If the samples follow it, rejections are Binomial(100, 0.01): P(X ≥ 5) = 0.34%
    # (scipy.stats.binom), so at most 4 rejections are allowed.
    traj, dens = pair(**ALL_CHANNELS)
    rejected = []
    for seed in range(SEEDS):
        rng = np.random.default_rng(1000 + seed)
        n = 4 + seed % 7
        circ = random_circuit(rng, n=n, length=n + 4, wide=True)
        counts = sampled(traj, circ, shots=CHI_SHOTS, seed=seed)
        if chisquare_pvalue(counts, exact(dens, circ), CHI_SHOTS) < ALPHA:
            rejected.append(seed)
    assert stats.binom.sf(4, SEEDS, ALPHA) < 0.004
    assert len(rejected) <= 4, rejected


def test_the_chisquare_check_rejects_a_wrong_noise_model() -> None:
    # The check above can fail: the same samples against a model with half the errors
    # are rejected far more often than 1% (common practice: a test of the test).
    traj, _ = pair(**ALL_CHANNELS)
    half = {k: v for k, v in ALL_CHANNELS.items()}
    half.update(depolarizing_1q=0.015, depolarizing_2q=0.04, readout_error=0.02)
    _, wrong = pair(**half)
    rejections = 0
    for seed in range(10):
        rng = np.random.default_rng(5000 + seed)
        circ = random_circuit(rng, n=4, length=12, wide=False)
        counts = sampled(traj, circ, shots=2000, seed=seed)
        rejections += chisquare_pvalue(counts, exact(wrong, circ), 2000) < ALPHA
    assert rejections >= 5


# -- contracts ----------------------------------------------------------------------------


def test_same_seed_same_counts_and_picklable() -> None:
    traj, _ = pair(**ALL_CHANNELS)
    circ = random_circuit(np.random.default_rng(3), n=5, length=12)
    again = pickle.loads(pickle.dumps(traj))
    assert isinstance(traj, LocalBackend)
    assert sampled(traj, circ, 500, seed=9) == sampled(again, circ, 500, seed=9)
    assert sampled(traj, circ, 500, seed=9) != sampled(traj, circ, 500, seed=10)


def test_shots_share_trajectories_above_the_default_and_the_result_says_so() -> None:
    assert share_shots(10, None) == [1] * 10
    assert share_shots(2500, None) == [3] * 500 + [2] * 500
    assert share_shots(7, 3) == [3, 2, 2]
    b = create_backend("noisy", {"adapter": "trajectories", "depolarizing_1q": 0.1})
    circ = circuit(1, [op("h", 0), measure(0, 0)], [1])
    result = b.execute(Task(circ, shots=2500, seed=1))
    assert result.metadata["trajectories"] == 1000
    assert result.metadata["shots_per_trajectory"] == "2-3"
    assert "share 1000 trajectories" in result.metadata["note"]
    alone = b.execute(Task(circ, shots=1000, seed=1))
    assert alone.metadata["shots_per_trajectory"] == "1"
    assert "note" not in alone.metadata
    assert sum(result.counts.values()) == 2500  # type: ignore[union-attr]


def test_noiseless_trajectories_reuse_the_ideal_state() -> None:
    # With readout error only, no trajectory leaves the quiet run: all read the ideal
    # state (the counts still show the readout error).
    b = TrajectoryBackend(config={"adapter": "trajectories", "readout_error": 0.5})
    circ = circuit(2, [op("x", 0), measure(0, 0), measure(1, 1)], [2])
    result = b.execute(Task(circ, shots=400, seed=2))
    assert result.metadata["trajectories_with_events"] == 0
    assert len(result.counts or {}) == 4


def test_refuses_exact_runs_and_bad_config() -> None:
    b = TrajectoryBackend()
    with pytest.raises(PermanentBackendError, match="no exact probabilities"):
        b.execute(Task(circuit(1, [measure(0, 0)], [1]), shots=1, exact=True))
    with pytest.raises(ConfigError, match="trajectories"):
        TrajectoryBackend(config={"adapter": "trajectories", "trajectories": 0})
    with pytest.raises(ConfigError, match="need gate_time"):
        TrajectoryBackend(config={"adapter": "trajectories", "t1": 1e-4})
