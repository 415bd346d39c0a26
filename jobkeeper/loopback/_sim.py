"""The loopback device's link to jobkeeper's own parser and state-vector simulator.

Imported lazily: the device server starts (and answers ``/stats``) without them loaded.
"""

from __future__ import annotations

from jobkeeper.exceptions import JobkeeperError
from jobkeeper.loopback._device import Outcome


def check_program(text: str) -> tuple[int, frozenset[str]]:
    """(qubits, opaque gates applied) of OpenQASM 2.0 ``text``; ValueError when invalid."""
    from jobkeeper.circuit import parse_qasm

    try:
        circuit = parse_qasm(text)
    except JobkeeperError as exc:
        raise ValueError(str(exc)) from None
    used = frozenset(op.name for op in circuit.operations if op.name in circuit.opaque)
    return circuit.num_qubits, used


def simulate(text: str, shots: int, seed: int, exact: bool) -> Outcome:
    """Run ``text`` on the state-vector simulator: counts of ``shots`` shots sampled with
    ``seed``, or exact probabilities. ValueError when it cannot run."""
    from jobkeeper.backend import Task
    from jobkeeper.backends import ideal_simulator
    from jobkeeper.circuit import parse_qasm

    try:
        circuit = parse_qasm(text)
        backend = ideal_simulator()
        task = Task(circuit=circuit, shots=shots, seed=seed, exact=exact, circuit_text=text)
        result = backend.execute(task)
    except JobkeeperError as exc:
        raise ValueError(str(exc)) from None
    if exact and result.probabilities is not None:
        return "probabilities", dict(result.probabilities)
    if result.counts is None:
        raise ValueError("the simulator gave no counts")
    return "counts", dict(result.counts)
