"""The noise model of the density-matrix simulator: what it is, how it is configured, the
channels it applies, and the estimate of an error-free run.

The model (every figure per qubit where a list is given, qubit q being entry q):

* **Depolarizing error** after every one- and two-qubit operation: with probability ``p``
  one of the non-identity Pauli products on the operation's qubits, chosen uniformly,
  follows it (3 for one qubit, 15 for two), so the operation is error-free with
  probability 1 − p. ``id`` (and ``u0``) are operations too: an idle slot on a device
  still decoheres. Gates on three or more qubits are run as their published standard-
  header definition (:func:`jobkeeper.circuit.stdgates.expand_standard`: ``U`` and
  ``CX`` primitives), each primitive with its own one- or two-qubit noise, because that
  is how a device runs them: a Toffoli costs six two-qubit gates, not one.
* **Readout error** ``e``: the classical outcome of a measurement is flipped with
  probability ``e`` (symmetric), independently per measurement. The qubit itself
  collapses to the true outcome; a later ``if`` reads the recorded (possibly flipped)
  bit, as a device's classical control would. A ``reset`` is a measurement followed by an X when it
  reads 1, so its readout error leaves the qubit in |1⟩ with probability ``e``.
* **Relaxation** (optional, needs ``t1`` and/or ``t2`` and both gate times): during
  each gate's duration, on the qubits the gate acts on (idle qubits do not decay: the
  model has no schedule that would say when a qubit idles), amplitude damping with
  γ = 1 − exp(−t/T1) (Nielsen & Chuang §8.3.5) and pure dephasing at the rate
  1/Tφ = 1/T2 − 1/(2·T1), so that coherences decay by exp(−t/T2) in all. No ``t1``
  means no damping; no ``t2`` means no pure dephasing (T2 = 2·T1). An ``id`` gate lasts
  ``gate_time_id`` (default ``gate_time_1q``). A measurement or reset lasts
  ``gate_time_readout`` (default 0): the measured qubit relaxes for that long before
  its outcome is taken (for a final measurement: at the end of the circuit, which is
  the same, since a finally measured qubit takes no later gate).

After a gate the order is: the gate, its depolarizing error, its relaxation.

Channels act on ρ stored as a vector of 4^n amplitudes, ρ[r, c] at index r·2^n + c:
qubit q of the rows is vector qubit n + q, of the columns vector qubit q. A channel with
Kraus operators K_i on k qubits is the 4^k × 4^k matrix Σ K_i ⊗ conj(K_i) on the vector
qubits (rows..., columns...), which the state-vector kernels apply in place.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import asdict, dataclass
from functools import lru_cache
from typing import Annotated, Any

import numpy as np
from pydantic import BaseModel, BeforeValidator, ConfigDict, ValidationError, model_validator

from jobkeeper.backends.sim.gates import Matrix
from jobkeeper.circuit.ir import BARRIER, MEASURE, RESET, Circuit
from jobkeeper.circuit.stdgates import STANDARD_GATES, expand_standard
from jobkeeper.exceptions import ConfigError

PerQubit = float | tuple[float, ...]

#: the keys of a noise table (top level of a backend's config, or its ``calibration``).
NOISE_KEYS = (
    "depolarizing_1q",
    "depolarizing_2q",
    "readout_error",
    "t1",
    "t2",
    "gate_time_1q",
    "gate_time_2q",
    "gate_time_id",
    "gate_time_readout",
)


def _number(value: Any) -> float:
    # A bool is an int to Python, and TOML strings are not numbers: refuse both rather
    # than let "0.1" or true slip through as a rate.
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ValueError(f"must be a number, got {value!r}")
    return float(value)


def _per_qubit(value: Any) -> PerQubit:
    if isinstance(value, list | tuple):
        if not value:
            raise ValueError("a per-qubit list must not be empty")
        return tuple(_number(v) for v in value)
    return _number(value)


Number = Annotated[float, BeforeValidator(_number)]
Numbers = Annotated[PerQubit, BeforeValidator(_per_qubit)]


def _entries(value: PerQubit) -> list[tuple[str, float]]:
    if isinstance(value, tuple):
        return [(f"[{i}]", v) for i, v in enumerate(value)]
    return [("", value)]


def at(
    value: PerQubit, qubit: int, beyond: Callable[[tuple[float, ...]], float] | None = None
) -> float:
    """The figure of ``qubit`` (a single number holds for every qubit). A qubit beyond a
    per-qubit list gets ``beyond(list)`` (the worst listed figure, for estimates only:
    the simulator refuses such circuits), or IndexError without it."""
    if not isinstance(value, tuple):
        return value
    if beyond is not None and qubit >= len(value):
        return beyond(value)
    return value[qubit]


class NoiseTable(BaseModel):
    """A noise table as written in configuration, validated."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    depolarizing_1q: Number = 0.0
    depolarizing_2q: Number = 0.0
    readout_error: Numbers = 0.0
    t1: Numbers | None = None
    t2: Numbers | None = None
    gate_time_1q: Number | None = None
    gate_time_2q: Number | None = None
    gate_time_id: Number | None = None
    gate_time_readout: Number | None = None

    @model_validator(mode="after")
    def _check(self) -> NoiseTable:
        problems: list[str] = []
        for key in ("depolarizing_1q", "depolarizing_2q", "readout_error"):
            for where, v in _entries(getattr(self, key)):
                if not 0.0 <= v <= 1.0:
                    problems.append(f"{key}{where} = {v} is not a probability in [0, 1]")
        for key in ("t1", "t2"):
            value = getattr(self, key)
            if value is not None:
                for where, v in _entries(value):
                    if not v > 0:
                        problems.append(f"{key}{where} = {v} must be a positive time in seconds")
        for key in ("gate_time_1q", "gate_time_2q", "gate_time_id", "gate_time_readout"):
            value = getattr(self, key)
            if value is not None and not (value >= 0 and math.isfinite(value)):
                problems.append(f"{key} = {value} must be a finite time ≥ 0 in seconds")
        lengths = {
            key: len(v)
            for key in ("readout_error", "t1", "t2")
            if isinstance(v := getattr(self, key), tuple)
        }
        if len(set(lengths.values())) > 1:
            problems.append(
                "per-qubit lists must have one entry per qubit, got lengths "
                + ", ".join(f"{k} {n}" for k, n in lengths.items())
            )
        elif self.t1 is not None and self.t2 is not None:
            width = max(lengths.values(), default=1)
            for q in range(width):
                t1, t2 = at(self.t1, q), at(self.t2, q)
                if t2 > 2 * t1:
                    where = f" of qubit {q}" if lengths else ""
                    problems.append(
                        f"t2{where} = {t2} exceeds 2·t1 = {2 * t1}: a qubit cannot dephase "
                        "slower than its relaxation allows (T2 ≤ 2·T1)"
                    )
        if (self.t1 is not None or self.t2 is not None) and (
            self.gate_time_1q is None or self.gate_time_2q is None
        ):
            problems.append(
                "t1/t2 need gate_time_1q and gate_time_2q (seconds): relaxation acts during "
                "each gate's duration"
            )
        if problems:
            raise ValueError("; ".join(problems))
        return self


@dataclass(frozen=True)
class NoiseModel:
    """The noise of the density-matrix simulator (see the module docstring for what each
    figure does). Validated on construction: a bad figure raises ConfigError."""

    depolarizing_1q: float = 0.0
    depolarizing_2q: float = 0.0
    readout_error: PerQubit = 0.0
    t1: PerQubit | None = None
    t2: PerQubit | None = None
    gate_time_1q: float | None = None
    gate_time_2q: float | None = None
    gate_time_id: float | None = None
    gate_time_readout: float | None = None

    def __post_init__(self) -> None:
        table = {k: v for k, v in asdict(self).items() if v is not None}
        validate_noise_table(table, "noise model")

    @property
    def relaxation(self) -> bool:
        return self.t1 is not None or self.t2 is not None

    @property
    def gate_noise(self) -> bool:
        """Whether gates are noisy (readout error alone leaves gates exact)."""
        return self.depolarizing_1q > 0 or self.depolarizing_2q > 0 or self.relaxation

    @property
    def noiseless(self) -> bool:
        readout = self.readout_error
        return not self.gate_noise and not any(
            at(readout, q) for q in range(len(readout) if isinstance(readout, tuple) else 1)
        )

    @property
    def num_qubits(self) -> int | None:
        """The number of qubits per-qubit lists describe (None: every figure is global)."""
        lengths = [len(v) for v in (self.readout_error, self.t1, self.t2) if isinstance(v, tuple)]
        return min(lengths) if lengths else None

    def readout(self, qubit: int) -> float:
        # Beyond the list, the worst listed qubit: see ``at``.
        return at(self.readout_error, qubit, max)

    def gate_time(self, arity: int | str) -> float:
        """Seconds a gate of ``arity`` (1 or 2), an ``"id"`` gate (default: a one-qubit
        gate's time) or a ``"readout"`` (default 0) takes (0 when not given)."""
        if arity == "id":
            return (self.gate_time_1q if self.gate_time_id is None else self.gate_time_id) or 0.0
        if arity == "readout":
            return self.gate_time_readout or 0.0
        return (self.gate_time_1q if arity == 1 else self.gate_time_2q) or 0.0

    def decay(self, qubit: int, duration: float) -> tuple[float, float]:
        """(γ of amplitude damping, probability of a phase flip) for ``duration`` seconds."""
        # Beyond the lists, the worst listed qubit: the shortest times.
        t1 = None if self.t1 is None else at(self.t1, qubit, min)
        t2 = None if self.t2 is None else at(self.t2, qubit, min)
        gamma = 0.0 if t1 is None else -math.expm1(-duration / t1)
        # Pure dephasing rate 1/Tφ = 1/T2 − 1/(2·T1) (no T2: none; no T1: 1/T2).
        rate = 0.0 if t2 is None else 1.0 / t2 - (0.0 if t1 is None else 0.5 / t1)
        flip = -0.5 * math.expm1(-duration * max(rate, 0.0))
        return gamma, flip

    def to_json(self) -> dict[str, Any]:
        """The model as a JSON-ready table of the configuration's shape (lists for
        per-qubit figures; absent figures left out)."""
        out: dict[str, Any] = {}
        for key, value in asdict(self).items():
            if value is None:
                continue
            out[key] = list(value) if isinstance(value, tuple) else value
        return out


def _problems(exc: ValidationError) -> str:
    return "; ".join(
        (".".join(str(p) for p in err["loc"]) + ": " if err["loc"] else "")
        + str(err["msg"]).removeprefix("Value error, ")
        for err in exc.errors()
    )


def validate_noise_table(table: Mapping[str, Any], what: str) -> NoiseTable:
    try:
        return NoiseTable.model_validate(dict(table))
    except ValidationError as exc:
        raise ConfigError(f"{what}: {_problems(exc)}") from None


def noise_model_from_calibration(snapshot: Mapping[str, Any]) -> NoiseModel:
    """The noise model a device's calibration snapshot describes.

    ``snapshot`` has the keys of a noise table, all optional: ``depolarizing_1q`` and
    ``depolarizing_2q`` (probability of an error per operation), ``readout_error`` (one
    probability, or a list with one per qubit), ``t1`` and ``t2`` (seconds, one or per
    qubit; T2 ≤ 2·T1), ``gate_time_1q`` and ``gate_time_2q`` (seconds; required with
    t1/t2), ``gate_time_id`` and ``gate_time_readout`` (seconds; optional). ``NoiseModel.to_json()`` gives a snapshot back, so a model round-trips.
    Raises ConfigError naming every bad figure.
    """
    table = validate_noise_table(snapshot, "calibration snapshot")
    return NoiseModel(
        depolarizing_1q=table.depolarizing_1q,
        depolarizing_2q=table.depolarizing_2q,
        readout_error=table.readout_error,
        t1=table.t1,
        t2=table.t2,
        gate_time_1q=table.gate_time_1q,
        gate_time_2q=table.gate_time_2q,
        gate_time_id=table.gate_time_id,
        gate_time_readout=table.gate_time_readout,
    )


# -- channels as superoperators on (row qubits..., column qubits...) ----------------------

_PAULIS = (
    np.eye(2, dtype=np.complex128),
    np.array([[0, 1], [1, 0]], dtype=np.complex128),
    np.array([[0, -1j], [1j, 0]], dtype=np.complex128),
    np.array([[1, 0], [0, -1]], dtype=np.complex128),
)


def superoperator(kraus: Sequence[Matrix]) -> Matrix:
    """Σ K ⊗ conj(K): the channel on the row-major vector of ρ (ρ → Σ K ρ K†)."""
    return np.asarray(sum(np.kron(k, k.conj()) for k in kraus), dtype=np.complex128)


@lru_cache(maxsize=64)
def depolarizing(p: float, arity: int) -> Matrix:
    """ρ → (1 − p)ρ + p/(4^k − 1) Σ_{P ≠ I} PρP on ``arity`` = k qubits."""
    paulis: list[Matrix] = [np.ones((1, 1), dtype=np.complex128)]
    for _ in range(arity):
        paulis = [np.asarray(np.kron(a, b), dtype=np.complex128) for a in paulis for b in _PAULIS]
    others = len(paulis) - 1
    kraus = [math.sqrt(1.0 - p) * paulis[0]] + [math.sqrt(p / others) * m for m in paulis[1:]]
    out = superoperator(kraus)
    out.setflags(write=False)
    return out


@lru_cache(maxsize=1024)
def relaxation(gamma: float, flip: float) -> Matrix:
    """Amplitude damping γ then a phase flip with probability ``flip`` on one qubit
    (the two commute: the damping's Kraus operators are diagonal or change sign under Z)."""
    damping = superoperator(
        [
            np.array([[1, 0], [0, math.sqrt(1.0 - gamma)]], dtype=np.complex128),
            np.array([[0, math.sqrt(gamma)], [0, 0]], dtype=np.complex128),
        ]
    )
    dephasing = superoperator([math.sqrt(1.0 - flip) * _PAULIS[0], math.sqrt(flip) * _PAULIS[3]])
    out = np.asarray(dephasing @ damping, dtype=np.complex128)
    out.setflags(write=False)
    return out


# -- the estimate of an error-free run ----------------------------------------------------


@lru_cache(maxsize=256)
def decomposition(name: str, arity: int) -> tuple[tuple[int, ...], ...]:
    """The qubit positions of the primitives a gate on ≥ 3 qubits is run as: its
    standard definition's ``U`` (one position) and ``CX`` (two). An unknown (opaque) gate
    counts as a chain of arity − 1 two-qubit operations, the least any entangling
    implementation needs."""
    spec = STANDARD_GATES.get(name)
    if spec is None or spec.body is None or spec.num_qubits != arity:
        return tuple((i, i + 1) for i in range(arity - 1))
    return tuple(p[1] for p in expand_standard(name, (0.0,) * spec.num_params))


def _log10_keep(p: float) -> float:
    return -math.inf if p >= 1.0 else math.log1p(-p) / math.log(10.0)


def log10_success_probability(circuit: Circuit, noise: NoiseModel) -> float:
    """log10 of the estimated probability that a run of ``circuit`` has no error.

    A sum of logarithms, so 100,000 operations at 99.5% do not underflow. Terms: each
    one-qubit operation log10(1 − depolarizing_1q), each two-qubit one
    log10(1 − depolarizing_2q), a gate on ≥ 3 qubits as its decomposition (see
    :func:`decomposition`), each measurement and reset log10(1 − e) of its qubit,
    barriers nothing. Conditional operations count as if they run (an upper bound on the
    work). With t1/t2, each gate adds per qubit it acts on the log10 of the relaxation
    channel's process fidelity over the gate time (a measurement or reset: over the
    readout time, on its qubit), (1 + 2·exp(−t/T2) + exp(−t/T1)) / 4
    (no T1: exp(−t/T1) = 1; no T2: T2 = 2·T1): for a Pauli channel that fidelity is
    exactly the probability of no error (for the depolarizing terms it is 1 − p), and for
    relaxation it is that probability of the channel's Pauli-twirled form.
    """
    keep = (_log10_keep(noise.depolarizing_1q), _log10_keep(noise.depolarizing_2q))
    fidelity: dict[tuple[int, int | str], float] = {}

    def relax(qubit: int, arity: int | str) -> float:
        key = (qubit, arity)
        if key not in fidelity:
            gamma, flip = noise.decay(qubit, noise.gate_time(arity))
            # Coherence factor √(1−γ)·(1 − 2·flip) = exp(−t/T2); population 1 − γ.
            coherence = math.sqrt(1.0 - gamma) * (1.0 - 2.0 * flip)
            fidelity[key] = math.log10((2.0 + 2.0 * coherence - gamma) / 4.0)
        return fidelity[key]

    total = 0.0
    for op in circuit.operations:
        if op.name == BARRIER:
            continue
        if op.name in (MEASURE, RESET):
            total += _log10_keep(noise.readout(op.qubits[0]))
            if noise.relaxation:
                total += relax(op.qubits[0], "readout")
            continue
        arity = len(op.qubits)
        if arity <= 2:
            total += keep[arity - 1]
            if noise.relaxation:
                kind: int | str = "id" if op.name in ("id", "u0") else arity
                total += sum(relax(q, kind) for q in op.qubits)
            continue
        for positions in decomposition(op.name, arity):
            qubits = [op.qubits[i] for i in positions]
            total += keep[len(qubits) - 1]
            if noise.relaxation:
                total += sum(relax(q, len(qubits)) for q in qubits)
    return total
