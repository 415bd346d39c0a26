"""Every public corpus circuit (../shared/corpus/qasm, attributed in its SOURCES.md) that
fits in 16 qubits runs on the state-vector backend and gives a normalised distribution.

Known invalid files are skipped (named in SOURCES.md as not valid OpenQASM 2.0)."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from jobkeeper.backend import Task
from jobkeeper.backends.sim.statevector import StatevectorBackend
from jobkeeper.circuit import load_qasm

INVALID = {
    "QASMBench/medium/sat_n11/sat_n11.qasm",
    "QASMBench/small/vqe_uccsd_n4/vqe_uccsd_n4.qasm",
}
MAX_QUBITS = 16


def _runnable(corpus_dir: Path) -> list[Path]:
    paths = []
    for path in sorted(corpus_dir.rglob("*.qasm")):
        rel = path.relative_to(corpus_dir).as_posix()
        if path.name.startswith("invalid_") or rel in INVALID:
            continue
        paths.append(path)
    return paths


def test_every_corpus_circuit_that_fits_runs(corpus_dir: Path) -> None:
    backend = StatevectorBackend()
    ran = 0
    for path in _runnable(corpus_dir):
        circuit = load_qasm(path)  # a parse failure here is a parser bug: let it fail
        if circuit.num_qubits > MAX_QUBITS:
            continue
        result = backend.execute(Task(circuit, 1000, seed=11, exact=True))
        assert result.counts is not None and result.probabilities is not None, path
        assert sum(result.counts.values()) == 1000, path
        assert sum(result.probabilities.values()) == pytest.approx(1.0, abs=1e-9), path
        assert set(result.counts) <= set(result.probabilities), path
        widths = {len(key) for key in result.counts}
        assert widths == {circuit.num_clbits + len(circuit.cregs) - 1}, path
        ran += 1
    assert ran >= 50


def test_corpus_teleport_delivers_the_prepared_state(corpus_dir: Path) -> None:
    # openqasm/examples/teleport.qasm prepares u3(0.3,0.2,0.1) on q[0] and teleports it
    # to q[2] with if-corrections; N&C section 1.3.7: q[2] reads 1 with p = sin²(0.3/2).
    circuit = load_qasm(corpus_dir / "openqasm/examples/teleport.qasm")
    result = StatevectorBackend().execute(Task(circuit, 0, seed=1, exact=True))
    assert result.probabilities is not None
    p1 = sum(p for key, p in result.probabilities.items() if key.split("|")[-1] == "1")
    assert p1 == pytest.approx(math.sin(0.15) ** 2, abs=1e-12)
