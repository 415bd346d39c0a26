"""The mapping from a device's calibration snapshot to the simulators' noise model
(jobkeeper.backends.sim.calibration), checked against the formulas it cites.

Sources: Nielsen, "A simple formula for the average gate fidelity of a quantum dynamical
operation", Phys. Lett. A 303, 249 (2002): F_avg = (d·F_pro + 1)/(d + 1), so a
depolarizing channel of process infidelity p has average infidelity r = d·p/(d + 1);
Nielsen & Chuang §8.3 for the relaxation channel's process fidelity (as in test_noise).
"""

from __future__ import annotations

import math

import pytest

from jobkeeper.backends.sim.calibration import noise_table_from_snapshot
from jobkeeper.backends.sim.densitymatrix import DensityMatrixBackend
from jobkeeper.backends.sim.trajectories import TrajectoryBackend
from jobkeeper.exceptions import ConfigError
from jobkeeper.hashing import digest_of

SNAPSHOT = {
    "device": "loopback",
    "fetched_at": "2026-12-05T10:00:00+00:00",
    "data": {
        "invented": True,
        "t1_us": [100.0, 50.0],
        "t2_us": [80.0, 120.0],  # qubit 1: above 2·T1, lowered to 100 µs
        "readout_error": [0.01, 0.02],
        "single_qubit_gate_error": 4e-4,
        "two_qubit_gate_error": 1e-2,
        "gate_time_1q_ns": 50,
        "gate_time_2q_ns": 300,
        "readout_time_ns": 1000,
    },
}


def relax_infidelity(t1: float, t2: float, t: float) -> float:
    # Process fidelity of damping + dephasing over t: (1 + 2·e^{−t/T2} + e^{−t/T1}) / 4.
    return 1 - (1 + 2 * math.exp(-t / t2) + math.exp(-t / t1)) / 4


def test_fields_map_to_the_noise_keys_with_units_and_the_t2_cap() -> None:
    table, steps = noise_table_from_snapshot(SNAPSHOT)
    assert table["t1"] == [100e-6, 50e-6]
    assert table["t2"] == [
        80e-6,
        100e-6,
    ]  # T2 ≤ 2·T1, the bound the noise model enforces (from memory: the standard bound)
    assert table["readout_error"] == [0.01, 0.02]
    assert table["gate_time_1q"] == pytest.approx(50e-9)
    assert table["gate_time_2q"] == pytest.approx(300e-9)
    assert table["gate_time_readout"] == pytest.approx(1e-6)
    assert any("lowered" in step and "[1]" in step for step in steps)


def test_gate_errors_become_process_infidelity_less_relaxation() -> None:
    # Nielsen (2002): process infidelity = (d+1)/d × average infidelity, d = 2^k. The
    # relaxation part is that of the mean T1 (75 µs) and mean T2 (90 µs) over the gate.
    table, _ = noise_table_from_snapshot(SNAPSHOT)
    one = relax_infidelity(75e-6, 90e-6, 50e-9)
    two = 1 - (1 - relax_infidelity(75e-6, 90e-6, 300e-9)) ** 2
    assert table["depolarizing_1q"] == pytest.approx(1.5 * 4e-4 - one, rel=1e-9)
    assert table["depolarizing_2q"] == pytest.approx(1.25 * 1e-2 - two, rel=1e-9)


def test_without_durations_relaxation_is_left_out_and_said_so() -> None:
    data = {"t1_us": [100.0], "t2_us": [80.0], "two_qubit_gate_error": 0.008}
    table, steps = noise_table_from_snapshot({"data": data})
    assert "t1" not in table and "t2" not in table
    assert table["depolarizing_2q"] == pytest.approx(1.25 * 0.008)
    assert any("no gate durations" in step for step in steps)


def test_a_malformed_snapshot_is_a_config_error() -> None:
    with pytest.raises(ConfigError, match="t1_us"):
        noise_table_from_snapshot({"data": {"t1_us": ["long"], "gate_time_1q_ns": 1}})


@pytest.mark.parametrize("cls", [TrajectoryBackend, DensityMatrixBackend])
def test_both_simulators_record_the_snapshot_digest_and_mapping(cls: type) -> None:
    adapter = "trajectories" if cls is TrajectoryBackend else "densitymatrix"
    config = {"adapter": adapter, "noise_from": "dev", "noise_snapshot": SNAPSHOT}
    backend = cls("standin", config)
    source = backend.info.calibration["derived_from"]
    assert source["snapshot_digest"] == digest_of(SNAPSHOT)
    assert source["backend"] == "dev" and source["fetched"] == "latest archived snapshot"
    assert backend.max_qubits == 2  # per-qubit lists describe a 2-qubit device
    with pytest.raises(ConfigError, match="resolved by the keep"):
        cls("standin", {"adapter": adapter, "noise_from": "dev"})
    with pytest.raises(ConfigError, match="takes the place"):
        cls("standin", {**config, "depolarizing_1q": 0.1})
