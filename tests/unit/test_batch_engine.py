"""Batches of sweep points (jobkeeper.backends.sim.batch, DESIGN §7): a point's state
and counts never depend on its batch; its counts are those of the same circuit run as a
single job with the same seed; other simulators run each point as a single job."""

from __future__ import annotations

import math
import random

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from jobkeeper.backend import BatchBackend, BatchPoint, Task
from jobkeeper.backends.sim.batch import EVOLUTION_VECTORISED, evolve, evolve_group
from jobkeeper.backends.sim.batch_points import group_points
from jobkeeper.backends.sim.densitymatrix import DensityMatrixBackend
from jobkeeper.backends.sim.statevector import StatevectorBackend
from jobkeeper.backends.sim.trajectories import TrajectoryBackend
from jobkeeper.circuit import Template, canonical_text, circuit_hash, parse_qasm
from jobkeeper.circuit.canonical import round_param
from jobkeeper.exceptions import PermanentBackendError
from jobkeeper.spec import JobSpec, job_key

H3 = 'OPENQASM 3.0;\ninclude "stdgates.inc";\n'
H2 = 'OPENQASM 2.0;\ninclude "qelib1.inc";\n'
PROGRAM = H3 + (
    "input float a;\ninput angle b;\nqubit[4] q;\nbit[3] c;\n"
    "h q[0];\nrx(a) q[1];\ncx q[0], q[2];\nry(b * 2) q[3];\ncrz(a - b) q[1], q[3];\n"
    "u3(a, b, 0.3) q[2];\ncp(b) q[0], q[1];\nrz(a / 3) q[3];\nswap q[0], q[3];\n"
    "c[0] = measure q[3];\nc[1] = measure q[0];\nc[2] = measure q[1];\n"
)
SV = StatevectorBackend()


def _points(count: int, shots: int = 300, seed: int = 7) -> list[BatchPoint]:
    rng = random.Random(seed)
    return [
        BatchPoint({"a": rng.uniform(-3, 3), "b": rng.uniform(-3, 3)}, shots, seed=1000 + i)
        for i in range(count)
    ]


def test_the_simulators_are_batch_backends() -> None:
    assert isinstance(SV, BatchBackend)
    assert isinstance(DensityMatrixBackend(), BatchBackend)


def test_states_are_bit_identical_whatever_the_batch() -> None:
    template = Template(PROGRAM)
    points = _points(300)
    circuits = [template.bind(p.values) for p in points]
    whole = evolve(circuits)
    rng = random.Random(3)
    for size in (1, 2, 7, 64, 299):
        picked = rng.sample(range(len(circuits)), size)
        part = evolve([circuits[i] for i in picked])
        assert part.re.tobytes() == whole.re[picked].tobytes()
        assert part.im.tobytes() == whole.im[picked].tobytes()
        # The same points kept as traced parameter slots (what run_batch evolves).
        (group,) = group_points(template, [points[i] for i in picked])
        assert group.shape is not None
        traced = evolve_group(group, range(size))
        assert traced.re.tobytes() == part.re.tobytes()
        assert traced.im.tobytes() == part.im.tobytes()


def test_states_agree_with_the_single_job_simulator() -> None:
    template = Template(PROGRAM.split("c[0] = measure")[0])
    circuits = [template.bind(p.values) for p in _points(20)]
    states = evolve(circuits)
    for row, circuit in enumerate(circuits):
        single = SV.final_state(circuit)
        batched = states.re[row] + 1j * states.im[row]
        assert np.max(np.abs(single - batched)) < 1e-13  # rounding only


def test_counts_do_not_depend_on_the_batch_and_equal_single_jobs() -> None:
    template = Template(PROGRAM)
    points = _points(120)
    whole = SV.run_batch(template, points)
    shuffled = list(range(len(points)))
    random.Random(5).shuffle(shuffled)
    parts = SV.run_batch(template, [points[i] for i in shuffled[:40]])
    for result, i in zip(parts, shuffled[:40], strict=True):
        assert result.counts == whole[i].counts
        assert result.metadata == whole[i].metadata
    for point, result in zip(points, whole, strict=True):
        single = SV.execute(Task(template.bind(point.values), point.shots, seed=point.seed))
        assert result.counts == single.counts
        assert result.metadata["seed"] == str(point.seed)
        assert result.metadata["evolution"] == EVOLUTION_VECTORISED
        assert {k: v for k, v in result.metadata.items() if k != "evolution"} == single.metadata


def test_exact_probabilities_match_the_single_job() -> None:
    template = Template(PROGRAM)
    points = [BatchPoint(p.values, 10, p.seed, exact=True) for p in _points(5)]
    for point, result in zip(points, SV.run_batch(template, points), strict=True):
        single = SV.execute(Task(template.bind(point.values), 10, seed=point.seed, exact=True))
        assert result.probabilities is not None and single.probabilities is not None
        assert result.probabilities.keys() == single.probabilities.keys()
        for key, p in single.probabilities.items():
            assert result.probabilities[key] == pytest.approx(p, abs=1e-13)


def test_rotation_probabilities_are_the_textbook_ones() -> None:
    # Nielsen & Chuang, eq. (4.5): Ry(θ)|0⟩ = cos(θ/2)|0⟩ + sin(θ/2)|1⟩, so P(1) = sin²(θ/2).
    template = Template(H3 + "input float t;\nqubit q;\nbit c;\nry(t) q;\nc = measure q;\n")
    angles = [k * math.pi / 8 for k in range(-8, 9)]
    points = [BatchPoint({"t": t}, 1, seed=1, exact=True) for t in angles]
    for t, result in zip(angles, SV.run_batch(template, points), strict=True):
        assert result.probabilities is not None
        # The angle run is the canonical form's, rounded to 12 significant digits.
        expected = math.sin(round_param(t) / 2) ** 2
        assert result.probabilities.get("1", 0.0) == pytest.approx(expected, abs=1e-14)


def test_mid_circuit_measurement_runs_point_by_point() -> None:
    text = H3 + (
        "input float a;\nqubit[2] q;\nbit[2] c;\nrx(a) q[0];\nc[0] = measure q[0];\n"
        "if (c[0]) x q[1];\nc[1] = measure q[1];\n"
    )
    template = Template(text)
    points = [BatchPoint({"a": 0.4 * k}, 200, seed=k) for k in range(6)]
    for point, result in zip(points, SV.run_batch(template, points), strict=True):
        single = SV.execute(Task(template.bind(point.values), 200, seed=point.seed))
        assert result == single  # no "evolution": it ran as a single job


@pytest.mark.parametrize(
    "backend",
    [
        DensityMatrixBackend(config={"adapter": "densitymatrix", "readout_error": 0.02}),
        TrajectoryBackend(config={"adapter": "trajectories", "readout_error": 0.02}),
    ],
    ids=["densitymatrix", "trajectories"],
)
def test_noisy_simulators_run_each_point_as_a_single_job(backend: object) -> None:
    assert isinstance(backend, BatchBackend)
    template = Template(
        H3 + "input float a;\nqubit[2] q;\nbit[2] c;\nrx(a) q[0];\ncx q[0], q[1];\nc = measure q;\n"
    )
    points = [BatchPoint({"a": 0.5 * k}, 64, seed=11 + k) for k in range(3)]
    results = backend.run_batch(template, points)
    for point, result in zip(points, results, strict=True):
        single = backend.execute(Task(template.bind(point.values), 64, seed=point.seed))
        assert result == single


def test_a_point_whose_circuit_is_not_its_jobs_is_refused() -> None:
    template = Template(PROGRAM)
    point = _points(1)[0]
    right = circuit_hash(template.bind(point.values))
    ok = BatchPoint(point.values, 10, 1, circuit_hash=right)
    assert SV.run_batch(template, [ok])[0].counts
    wrong = BatchPoint({"a": 0.0, "b": 0.0}, 10, 1, circuit_hash=right)
    with pytest.raises(PermanentBackendError, match="point 0"):
        SV.run_batch(template, [wrong])
    with pytest.raises(PermanentBackendError, match="does not bind"):
        SV.run_batch(template, [BatchPoint({"a": 1.0}, 10, 1)])


# -- a sweep point and its literal twin are one job with the same counts -----------------

_GATES_1 = ["rx", "ry", "rz", "p"]
_GATES_2 = ["crz", "cp", "crx"]


@st.composite
def _template_and_twin(
    draw: st.DrawFn,
) -> tuple[list[tuple[str, tuple[int, ...], float, float]], int]:
    n = draw(st.integers(1, 4))
    ops = []
    for _ in range(draw(st.integers(1, 8))):
        scale = draw(st.sampled_from([1.0, 2.0, -0.5, 3.25]))
        offset = draw(st.sampled_from([0.0, 0.125, -1.5]))
        if n > 1 and draw(st.booleans()):
            a, b = draw(st.lists(st.integers(0, n - 1), min_size=2, max_size=2, unique=True))
            ops.append((draw(st.sampled_from(_GATES_2)), (a, b), scale, offset))
        else:
            ops.append(
                (draw(st.sampled_from(_GATES_1)), (draw(st.integers(0, n - 1)),), scale, offset)
            )
    return ops, n


def _texts(
    ops: list[tuple[str, tuple[int, ...], float, float]], n: int, theta: float
) -> tuple[str, str]:
    body3, body2 = [], []
    for name, qubits, scale, offset in ops:
        q3 = ", ".join(f"q[{q}]" for q in qubits)
        q2 = ",".join(f"q[{q}]" for q in qubits)
        body3.append(f"{name}(theta * {scale!r} + {offset!r}) {q3};")
        # The literal twin: the value the expression has, written out (Python's float
        # arithmetic is IEEE 754's, as the interpreter's is).
        body2.append(f"{name}({theta * scale + offset!r}) {q2};")
    program = (
        H3
        + f"input float theta;\nqubit[{n}] q;\nbit[{n}] c;\n"
        + "\n".join(body3)
        + "\nc = measure q;\n"
    )
    twin = H2 + f"qreg q[{n}];\ncreg c[{n}];\n" + "\n".join(body2) + "\nmeasure q -> c;\n"
    return program, twin


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    shape=_template_and_twin(),
    thetas=st.lists(st.floats(-6, 6, allow_nan=False), min_size=1, max_size=5),
    seed=st.integers(0, 2**63 - 1),
)
def test_a_sweep_point_and_its_literal_twin_are_one_job(
    shape: tuple[list[tuple[str, tuple[int, ...], float, float]], int],
    thetas: list[float],
    seed: int,
) -> None:
    ops, n = shape
    program, _ = _texts(ops, n, 0.0)
    template = Template(program)
    points = [BatchPoint({"theta": t}, 100, seed=seed) for t in thetas]
    results = SV.run_batch(template, points)
    config = SV.info.config_hash
    for theta, point, result in zip(thetas, points, results, strict=True):
        twin = parse_qasm(_texts(ops, n, theta)[1])
        circuit, text = template.bind_canonical(point.values)
        assert circuit_hash(circuit) == circuit_hash(twin)

        def key(text: str, digest: str) -> str:
            spec = JobSpec.new(circuit_text=text, circuit_hash=digest, backend="statevector",
                               shots=100, seed=seed)  # fmt: skip
            return job_key(spec, backend_config_hash=config)

        assert text == canonical_text(twin)
        assert key(text, circuit_hash(circuit)) == key(canonical_text(twin), circuit_hash(twin))
        single = SV.execute(Task(twin, 100, seed=seed))
        assert result.counts == single.counts
