"""The noise model's configuration, the calibration snapshot, the channels' definitions,
the decomposition of wide gates, and the pre-flight estimate (log10 of the probability of
an error-free run).

Sources beside each check: Nielsen & Chuang chapter 8 (channels; entanglement fidelity
F_e = Σ|Tr K|²/d², §9.3); the OpenQASM 2.0 header definitions (arXiv:1707.03429) for the
decompositions; figures of device quality as common practice, said where used.
"""

from __future__ import annotations

import math
import time
from typing import Any

import numpy as np
import pytest

from jobkeeper.backend import Pricing
from jobkeeper.backends import create_backend
from jobkeeper.backends.sim.density_program import primitives
from jobkeeper.backends.sim.densitymatrix import (
    DensityMatrixBackend,
    NoiseModel,
    from_config,
    noise_model_from_calibration,
)
from jobkeeper.backends.sim.gates import gate_matrix
from jobkeeper.backends.sim.noise import decomposition, depolarizing, relaxation, superoperator
from jobkeeper.circuit.ir import Circuit, Operation, Register
from jobkeeper.exceptions import ConfigError
from jobkeeper.hashing import digest_of
from tests.unit.test_densitymatrix_helpers import pauli_products
from tests.unit.test_statevector_helpers import on_register

# -- configuration ------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("config", "needle"),
    [
        ({"depolarizing_1q": 1.5}, "depolarizing_1q = 1.5 is not a probability"),
        ({"depolarizing_2q": -0.1}, "depolarizing_2q = -0.1 is not a probability"),
        ({"readout_error": [0.1, 2.0]}, "readout_error[1] = 2.0 is not a probability"),
        ({"readout_error": []}, "must not be empty"),
        ({"depolarizing_1q": True}, "must be a number"),
        ({"depolarizing_1q": "0.1"}, "must be a number"),
        ({"depolarizing_1q": float("nan")}, "not a probability"),
        ({"t1": 1e-4, "t2": 3e-4, "gate_time_1q": 1e-8, "gate_time_2q": 1e-7}, "T2 ≤ 2·T1"),
        (
            {"t1": [1e-4, 1e-4], "t2": [1e-4, 3e-4], "gate_time_1q": 0, "gate_time_2q": 0},
            "t2 of qubit 1",
        ),
        ({"t1": 1e-4}, "need gate_time_1q and gate_time_2q"),
        ({"t1": -1.0, "gate_time_1q": 0, "gate_time_2q": 0}, "t1 = -1.0 must be a positive"),
        ({"t2": 1e-4, "gate_time_1q": -1, "gate_time_2q": 0}, "gate_time_1q = -1.0"),
        ({"readout_error": [0.1, 0.1], "t1": [1.0, 1.0, 1.0]}, "one entry per qubit"),
        ({"depolarising_1q": 0.1}, "depolarising_1q"),
        ({"max_qubits": 0}, "max_qubits"),
        ({"max_qubits": 17}, "max_qubits"),
        ({"pricing": {"per_shot": -1}}, "pricing.per_shot"),
        ({"calibration": {"readout_error": 0.1}, "depolarizing_1q": 0.1}, "give it in one place"),
        ({"calibration": {"readout_error": 7}}, "readout_error = 7.0 is not a probability"),
    ],
)
def test_bad_configuration_is_refused_with_a_clear_message(
    config: dict[str, Any], needle: str
) -> None:
    with pytest.raises(ConfigError) as info:
        from_config("noisy", {"adapter": "densitymatrix", **config})
    assert needle in str(info.value)
    assert "'noisy'" in str(info.value)


def test_the_registry_builds_it_and_the_info_describes_it() -> None:
    config = {
        "adapter": "densitymatrix",
        "depolarizing_1q": 0.001,
        "depolarizing_2q": 0.005,
        "readout_error": 0.01,
        "t1": 1e-4,
        "t2": 8e-5,
        "gate_time_1q": 2e-8,
        "gate_time_2q": 2e-7,
        "max_qubits": 8,
        "pricing": {"per_task": 1.0, "per_shot": 0.002, "currency": "credits"},
    }
    backend = create_backend("noisy", config)
    assert isinstance(backend, DensityMatrixBackend)
    info = backend.info
    assert info.name == "noisy" and info.kind == "simulator" and info.max_qubits == 8
    assert info.deterministic and info.mid_circuit_measurement
    assert info.config_hash == digest_of(config)
    assert info.pricing == Pricing(currency="credits", per_task=1.0, per_shot=0.002)
    assert info.calibration == {
        k: v for k, v in config.items() if k not in ("adapter", "max_qubits", "pricing")
    }
    assert "+dm" in info.version


def test_a_calibration_table_gives_the_same_model_as_top_level_keys() -> None:
    noise = {"depolarizing_2q": 0.01, "readout_error": [0.01, 0.03], "t1": [5e-5, 6e-5]}
    noise |= {"gate_time_1q": 1e-8, "gate_time_2q": 1e-7}
    top = from_config("a", {"adapter": "densitymatrix", **noise})
    nested = from_config("b", {"adapter": "densitymatrix", "calibration": noise})
    assert top.noise == nested.noise == noise_model_from_calibration(noise)
    # The snapshot round-trips through the info's calibration.
    assert noise_model_from_calibration(dict(top.info.calibration or {})) == top.noise


def test_a_noise_model_validates_itself() -> None:
    with pytest.raises(ConfigError, match="not a probability"):
        NoiseModel(depolarizing_2q=2.0)
    with pytest.raises(ConfigError, match="need gate_time"):
        NoiseModel(t1=1e-4)
    with pytest.raises(ConfigError, match="either a configuration or a noise model"):
        DensityMatrixBackend(config={}, noise=NoiseModel())


# -- channels -------------------------------------------------------------------------------


def _apply(superop: np.ndarray, rho: np.ndarray) -> np.ndarray:
    # Row-major vectorisation: vec(AρB^T) = (A ⊗ B) vec(ρ) (standard identity).
    d = rho.shape[0]
    return (superop @ rho.reshape(-1)).reshape(d, d)


@pytest.mark.parametrize("arity", [1, 2])
def test_depolarizing_superoperator_is_the_pauli_mixture(arity: int) -> None:
    # N&C §8.3.4 with p the total probability of a non-identity Pauli product.
    p, d = 0.37, 2**arity
    rng = np.random.default_rng(arity)
    a = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    rho = a @ a.conj().T
    rho /= np.trace(rho)
    paulis = pauli_products(arity)
    expected = (1 - p) * rho + p / (len(paulis) - 1) * sum(m @ rho @ m.conj().T for m in paulis[1:])
    np.testing.assert_allclose(_apply(depolarizing(p, arity), rho), expected, atol=1e-14)


def test_relaxation_superoperator_damps_and_dephases() -> None:
    # N&C §8.3.5: populations ρ11 → (1−γ)ρ11, ρ00 → ρ00 + γρ11; coherence scaled by
    # √(1−γ) from damping and (1 − 2f) from a phase flip with probability f (§8.3.3).
    gamma, flip = 0.2, 0.1
    rho = np.array([[0.3, 0.2 - 0.1j], [0.2 + 0.1j, 0.7]])
    out = _apply(relaxation(gamma, flip), rho)
    assert out[1, 1] == pytest.approx(0.7 * (1 - gamma))
    assert out[0, 0] == pytest.approx(0.3 + 0.7 * gamma)
    assert out[0, 1] == pytest.approx((0.2 - 0.1j) * math.sqrt(1 - gamma) * (1 - 2 * flip))


def test_superoperator_of_a_unitary_conjugates() -> None:
    u = gate_matrix("u3", (0.3, 0.2, 0.1))
    rho = np.array([[0.6, 0.1j], [-0.1j, 0.4]])
    np.testing.assert_allclose(_apply(superoperator([u]), rho), u @ rho @ u.conj().T, atol=1e-15)


@pytest.mark.parametrize("name", ["ccx", "cswap", "rccx", "c3x", "rc3x", "c3sqrtx", "c4x"])
def test_wide_gates_run_as_a_decomposition_equal_to_the_gate(name: str) -> None:
    # The published header bodies (arXiv:1707.03429 and the later headers, see
    # jobkeeper.circuit.stdgates) equal the gate up to a global phase.
    target = gate_matrix(name)
    k = int(math.log2(target.shape[0]))
    total = np.eye(2**k, dtype=complex)
    for qubits, matrix in primitives(name, (), tuple(range(k))):
        total = on_register(matrix, qubits, k) @ total
    phase = np.vdot(total.reshape(-1), target.reshape(-1))
    phase /= abs(phase)
    np.testing.assert_allclose(total * phase, target, atol=1e-12)


def test_the_toffoli_counts_six_two_qubit_gates() -> None:
    # The standard header's ccx body: 6 cx and 9 single-qubit gates.
    arity = [len(q) for q in decomposition("ccx", 3)]
    assert arity.count(2) == 6 and arity.count(1) == 9


# -- the pre-flight estimate ----------------------------------------------------------------


def _circuit(num_qubits: int, ops: list[Operation]) -> Circuit:
    return Circuit(
        num_qubits=num_qubits,
        num_clbits=num_qubits,
        qregs=(Register("q", num_qubits, 0),),
        cregs=(Register("c", num_qubits, 0),),
        operations=tuple(ops),
    )


def test_a_hundred_thousand_two_qubit_gates_do_not_underflow() -> None:
    # 99.5% two-qubit fidelity: a figure commonly quoted for good trapped-ion devices
    # (common practice, no single source). 0.995^100000 ≈ 10^-217.7 underflows no float
    # as a log.
    ops = [Operation("cx", (i % 20, (i + 1) % 20)) for i in range(100_000)]
    circ = _circuit(20, ops)  # built in the IR directly: never simulated
    backend = from_config("ion", {"adapter": "densitymatrix", "depolarizing_2q": 0.005})
    start = time.perf_counter()
    log10_p = backend.success_probability(circ)
    assert time.perf_counter() - start < 5
    assert log10_p < -200
    assert log10_p == pytest.approx(100_000 * math.log10(0.995), rel=1e-12)


def test_twenty_two_qubit_gates_at_99_5_percent_are_about_ninety_percent() -> None:
    ops = [Operation("cx", (i % 5, (i + 1) % 5)) for i in range(20)]
    ops += [Operation("barrier", tuple(range(5)))]
    backend = from_config("ion", {"adapter": "densitymatrix", "depolarizing_2q": 0.005})
    p = 10 ** backend.success_probability(_circuit(5, ops))
    assert p == pytest.approx(0.995**20, rel=1e-12)
    assert p == pytest.approx(0.90, abs=0.01)


def test_the_estimate_counts_every_kind_of_operation() -> None:
    ops = [
        Operation("h", (0,)),
        Operation("cx", (0, 1)),
        Operation("ccx", (0, 1, 2)),
        Operation("measure", (0,), clbits=(0,)),
        Operation("reset", (1,)),
        Operation("barrier", (0, 1, 2)),
    ]
    config = {"depolarizing_1q": 0.01, "depolarizing_2q": 0.02, "readout_error": [0.1, 0.2, 0.3]}
    backend = from_config("x", {"adapter": "densitymatrix", **config})
    expected = (
        (1 + 9) * math.log10(0.99)  # h, and the ccx's nine single-qubit gates
        + (1 + 6) * math.log10(0.98)  # cx, and the ccx's six cx
        + math.log10(0.9)  # measure qubit 0
        + math.log10(0.8)  # reset qubit 1
    )
    assert backend.success_probability(_circuit(3, ops)) == pytest.approx(expected, rel=1e-12)
    assert from_config("z", {"adapter": "densitymatrix"}).success_probability(_circuit(3, ops)) == 0


def test_the_relaxation_term_is_the_process_fidelity_of_the_channel() -> None:
    # Entanglement (process) fidelity F_e = Σ|Tr K_i|² / d² (N&C §9.3, eq. 9.136 form);
    # for depolarizing it is 1 − p, the probability of no error; the estimate uses it
    # for the relaxation channel of each gate's duration on each qubit.
    t1, t2, g1 = 40e-6, 30e-6, 1e-6
    config = {"t1": t1, "t2": t2, "gate_time_1q": g1, "gate_time_2q": 1e-7}
    backend = from_config("x", {"adapter": "densitymatrix", **config})
    gamma = 1 - math.exp(-g1 / t1)
    flip = (1 - math.exp(-g1 * (1 / t2 - 1 / (2 * t1)))) / 2
    kraus = [
        math.sqrt(1 - flip) * np.diag([1, math.sqrt(1 - gamma)]),
        math.sqrt(1 - flip) * np.array([[0, math.sqrt(gamma)], [0, 0]]),
        math.sqrt(flip) * np.diag([1, -math.sqrt(1 - gamma)]),
        math.sqrt(flip) * np.array([[0, -math.sqrt(gamma)], [0, 0]]),
    ]
    fidelity = sum(abs(np.trace(k)) ** 2 for k in kraus) / 4
    estimate = backend.success_probability(_circuit(1, [Operation("x", (0,))]))
    assert estimate == pytest.approx(math.log10(fidelity), rel=1e-12)
    # (1 + 2·exp(−t/T2) + exp(−t/T1)) / 4, the closed form in the docstring.
    closed = (1 + 2 * math.exp(-g1 / t2) + math.exp(-g1 / t1)) / 4
    assert fidelity == pytest.approx(closed, rel=1e-12)


def test_a_certain_error_is_minus_infinity() -> None:
    backend = from_config("x", {"adapter": "densitymatrix", "readout_error": 1.0})
    assert (
        backend.success_probability(_circuit(1, [Operation("measure", (0,), clbits=(0,))]))
        == -math.inf
    )


def test_qubits_beyond_the_per_qubit_lists_are_estimated_at_the_worst_listed_figure() -> None:
    # Pre-flight still gives a figure for a circuit too wide for the model (it reports
    # separately that the circuit does not fit); the simulator itself refuses it.
    backend = from_config("x", {"adapter": "densitymatrix", "readout_error": [0.1, 0.3]})
    circ = _circuit(3, [Operation("measure", (2,), clbits=(2,))])
    assert backend.success_probability(circ) == pytest.approx(math.log10(0.7), rel=1e-12)
    assert backend.info.max_qubits == 2
