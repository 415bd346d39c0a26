"""``jobkeeper check``: whether a circuit fits, what it costs, and whether it has any chance
of producing signal on a noisy backend."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from jobkeeper.cli import main

NOISY = """[backends.noisy]
adapter = "densitymatrix"
depolarizing_1q = 0.0
depolarizing_2q = 0.005
readout_error = 0.0
gate_time_1q = 5e-8
gate_time_2q = 3e-7
pricing = { per_task = 0.3, per_shot = 0.001, currency = "credits" }
"""


def _circuit(path: Path, two_qubit_ops: int, qubits: int = 5) -> Path:
    lines = ["OPENQASM 2.0;", 'include "qelib1.inc";', f"qreg q[{qubits}];", f"creg c[{qubits}];"]
    lines += [f"cx q[{i % (qubits - 1)}],q[{i % (qubits - 1) + 1}];" for i in range(two_qubit_ops)]
    path.write_text("\n".join([*lines, "measure q -> c;"]) + "\n")
    return path


@pytest.fixture
def keep(tmp_path: Path) -> str:
    (tmp_path / "keep").mkdir()
    (tmp_path / "keep" / "config.toml").write_text(NOISY)
    return str(tmp_path / "keep")


def run_check(capsys, *args: str) -> tuple[int, dict]:
    code = main(["check", *args, "--json"])
    return code, json.loads(capsys.readouterr().out)


def test_hundred_thousand_two_qubit_operations_are_mostly_noise(capsys, keep, tmp_path) -> None:
    # Two-qubit fidelity ≥ 99.5% is a figure commonly quoted for good trapped-ion devices
    # (common practice); 0.995^100000 = 10^(100000·log10 0.995) ≈ 10^-217.7.
    code, report = run_check(capsys, str(_circuit(tmp_path / "big.qasm", 100_000)), "-b", "noisy",
                             "--keep", keep)  # fmt: skip
    assert code == 0 and report["fits"]
    assert report["log10_success_probability"] < -200
    assert report["success_probability"] < 1e-200
    assert any("mostly noise" in w for w in report["warnings"])


def test_twenty_two_qubit_operations_are_estimated_at_0_90(capsys, keep, tmp_path) -> None:
    _, report = run_check(capsys, str(_circuit(tmp_path / "s.qasm", 20)), "-b", "noisy",
                             "--keep", keep, "--shots", "1000")  # fmt: skip
    assert report["success_probability"] == pytest.approx(0.995**20, rel=1e-9)  # ≈ 0.905
    assert report["cost"] == pytest.approx(0.3 + 1000 * 0.001)  # the backend's own pricing
    assert report["duration_seconds"] is not None and report["warnings"] == []


def test_a_circuit_too_wide_does_not_fit(capsys, keep, tmp_path) -> None:
    code, report = run_check(capsys, str(_circuit(tmp_path / "w.qasm", 3, qubits=14)), "-b",
                             "noisy", "--keep", keep)  # fmt: skip
    assert code == 1
    assert report["fits"] is False and "14 qubits" in report["problems"][0]
    assert main(["check", str(tmp_path / "w.qasm"), "-b", "noisy", "--keep", keep]) == 1


STANDIN = """[backends.standin]
adapter = "trajectories"
depolarizing_2q = 0.005
readout_error = 0.01
t1 = 1e-4
t2 = 8e-5
gate_time_1q = 5e-8
gate_time_2q = 3e-7
"""


def test_check_says_the_method_its_memory_and_a_time(capsys, tmp_path) -> None:
    # 2^10 amplitudes × 40 bytes (two state vectors and the probabilities) = 40,960 bytes.
    (tmp_path / "keep").mkdir()
    (tmp_path / "keep" / "config.toml").write_text(STANDIN)
    code, report = run_check(capsys, str(_circuit(tmp_path / "c.qasm", 30, qubits=10)), "-b",
                             "standin", "--keep", str(tmp_path / "keep"), "--shots", "3000")  # fmt: skip
    plan = report["simulation"]
    assert code == 0 and plan["method"] == "trajectories"
    assert plan["memory_bytes"] == 40_960 and plan["trajectories"] == 1000
    assert plan["shots_per_trajectory"] == "3" and plan["seconds"] > 0
    main(["check", str(tmp_path / "c.qasm"), "-b", "standin", "--keep", str(tmp_path / "keep")])
    assert "simulation: trajectories (" in capsys.readouterr().out


def test_check_refuses_a_circuit_beyond_the_memory_available(capsys, tmp_path) -> None:
    # 40 qubits × 40 bytes per amplitude = 44 TB: more than any machine this runs on has.
    (tmp_path / "keep").mkdir()
    (tmp_path / "keep" / "config.toml").write_text(
        STANDIN.replace("t1 = 1e-4", "max_qubits = 40\nt1 = 1e-4")
    )
    code = main(["check", str(_circuit(tmp_path / "big.qasm", 5, qubits=40)), "-b", "standin",
                 "--keep", str(tmp_path / "keep")])  # fmt: skip
    assert code == 2
    err = capsys.readouterr().err
    assert "refused" in err and "more than" in err and "Traceback" not in err
