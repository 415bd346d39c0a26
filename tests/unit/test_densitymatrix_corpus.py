"""Without noise, the density-matrix backend gives the state-vector backend's exact
distributions: on every public corpus circuit (../shared/corpus/qasm, attributed in its
SOURCES.md) that fits in 12 qubits, and on circuits with mid-circuit measurement, reset
and ``if``. Reference: the state-vector backend, itself checked against published gate
definitions, stim and a brute-force density matrix in its own tests.

Known invalid files are skipped (named in SOURCES.md as not valid OpenQASM 2.0).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from jobkeeper.backend import Task
from jobkeeper.backends.sim.densitymatrix import DensityMatrixBackend
from jobkeeper.backends.sim.statevector import StatevectorBackend
from jobkeeper.circuit import load_qasm
from jobkeeper.circuit.ir import Circuit
from tests.unit.test_densitymatrix_helpers import random_circuit
from tests.unit.test_statevector_helpers import tvd

INVALID = {
    "QASMBench/medium/sat_n11/sat_n11.qasm",
    "QASMBench/small/vqe_uccsd_n4/vqe_uccsd_n4.qasm",
}
#: the default max_qubits of the backend.
MAX_QUBITS = 12
#: ρ of 11-12 qubits is 64-256 MiB per pass: those few circuits run in their own test.
FAST_QUBITS = 10
TOL = 1e-9
REPO = Path(__file__).resolve().parents[2]


def _exact(backend: DensityMatrixBackend | StatevectorBackend, circ: Circuit) -> dict[str, float]:
    result = backend.execute(Task(circ, shots=0, seed=1, exact=True))
    assert result.probabilities is not None
    return dict(result.probabilities)


def _corpus(corpus_dir: Path, low: int, high: int) -> list[tuple[str, Circuit]]:
    out = []
    for path in sorted(corpus_dir.rglob("*.qasm")):
        rel = path.relative_to(corpus_dir).as_posix()
        if path.name.startswith("invalid_") or rel in INVALID:
            continue
        circ = load_qasm(path)
        if low <= circ.num_qubits <= high:
            out.append((rel, circ))
    return out


def _compare(circuits: list[tuple[str, Circuit]]) -> None:
    dm, sv = DensityMatrixBackend(), StatevectorBackend()
    for rel, circ in circuits:
        assert tvd(_exact(dm, circ), _exact(sv, circ)) < TOL, rel


def test_corpus_circuits_up_to_ten_qubits_match_the_state_vector_backend(
    corpus_dir: Path,
) -> None:
    circuits = _corpus(corpus_dir, 0, FAST_QUBITS)
    assert len(circuits) >= 50
    _compare(circuits)


@pytest.mark.slow
def test_corpus_circuits_of_eleven_and_twelve_qubits_match_the_state_vector_backend(
    corpus_dir: Path,
) -> None:
    circuits = _corpus(corpus_dir, FAST_QUBITS + 1, MAX_QUBITS)
    assert circuits
    # In a child process with single-threaded BLAS: on a busy machine threaded BLAS on
    # these small products ran 5× slower (measured: 121 s against 23 s), and the thread
    # count is fixed when numpy is first imported, long before this test runs.
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}
    script = "import sys; from tests.unit.test_densitymatrix_corpus import main; main(sys.argv[1:])"
    paths = [str(corpus_dir / rel) for rel, _ in circuits]
    proc = subprocess.run(
        [sys.executable, "-c", script, *paths],
        cwd=REPO, env=env, capture_output=True, text=True, timeout=600, check=False,
    )  # fmt: skip
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert proc.stdout.splitlines() == paths


def main(paths: list[str]) -> None:
    """The comparison for the child process: prints each circuit's path as it passes."""
    for path in paths:
        circ = load_qasm(Path(path))
        _compare([(path, circ)])
        print(path, flush=True)


@pytest.mark.parametrize("seed", range(20))
def test_mid_circuit_measurement_reset_and_if_match_the_state_vector_backend(seed: int) -> None:
    circ = random_circuit(np.random.default_rng(100 + seed), n=3, length=16)
    assert tvd(_exact(DensityMatrixBackend(), circ), _exact(StatevectorBackend(), circ)) < TOL


def test_readout_error_zero_and_gate_noise_zero_is_the_noiseless_backend() -> None:
    # An explicit all-zero noise table is the same model as none at all.
    circ = random_circuit(np.random.default_rng(9))
    zero = DensityMatrixBackend(
        config={"depolarizing_1q": 0, "depolarizing_2q": 0.0, "readout_error": [0, 0, 0]}
    )
    assert tvd(_exact(zero, circ), _exact(StatevectorBackend(), circ)) < TOL
