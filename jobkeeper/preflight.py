"""Pre-flight: will a circuit run on a backend, what will it cost, and is there any hope
of signal? (``jobkeeper check``.)"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from jobkeeper.backend import Backend
from jobkeeper.circuit import Circuit, CircuitMetrics, circuit_hash, metrics
from jobkeeper.circuit.ir import NON_GATE_OPERATIONS
from jobkeeper.exceptions import CircuitError
from jobkeeper.sweeps import Bindings

#: Below this estimated probability of an error-free run, results are mostly noise.
NOISE_WARNING = 0.01


@dataclass
class PreflightReport:
    file: str
    circuit_hash: str
    backend: str
    metrics: CircuitMetrics
    fits: bool
    problems: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    success_probability: float | None = None
    log10_success_probability: float | None = None
    cost: float | None = None
    currency: str | None = None
    shots: int = 0
    duration_seconds: float | None = None
    #: a local simulator's plan: method, memory and a rough CPU time (None elsewhere).
    simulation: dict[str, Any] | None = None
    #: the values the program's input parameters were bound with
    inputs: Bindings = field(default_factory=Bindings)

    def to_json(self) -> dict[str, Any]:
        return {
            "file": self.file,
            "inputs": self.inputs.numbers(),
            "circuit_hash": self.circuit_hash,
            "backend": self.backend,
            "fits": self.fits,
            "problems": self.problems,
            "metrics": self.metrics.to_json(),
            "success_probability": self.success_probability,
            "log10_success_probability": self.log10_success_probability,
            "shots": self.shots,
            "cost": self.cost,
            "currency": self.currency,
            "duration_seconds": self.duration_seconds,
            "simulation": self.simulation,
            "warnings": self.warnings,
        }

    def summary(self) -> str:
        m = self.metrics
        lines = [
            f"{self.file}: {self.circuit_hash}",
            f"  qubits {m.num_qubits} (used {len(m.qubits_used)}), bits {m.num_clbits}, "
            f"depth {m.depth}, multi-qubit operations {m.multi_qubit_operations}",
            *([f"  inputs: {self.inputs.describe()}"] if self.inputs else []),
            "  operations: " + ", ".join(f"{k} {v}" for k, v in sorted(m.operation_counts.items())),
            f"  measurements all terminal: {'yes' if m.measurements_terminal else 'no'}",
            f"  backend {self.backend}: " + ("fits" if self.fits else "does NOT fit"),
        ]
        lines += [f"    - {p}" for p in self.problems]
        if self.simulation is not None:
            lines.append("  simulation: " + _plan(self.simulation))
        if self.success_probability is not None:
            lines.append(f"  estimated probability of an error-free run: {_prob(self)}")
        if self.cost is not None:
            lines.append(
                f"  estimated cost for {self.shots} shots: {self.cost:.4g} {self.currency}"
            )
        if self.duration_seconds is not None:
            lines.append(
                f"  estimated device time for {self.shots} shots: about "
                f"{self.duration_seconds:.3g} s (depth × slowest gate time, no queueing)"
            )
        lines += [f"  WARNING: {w}" for w in self.warnings]
        return "\n".join(lines)


def _bytes(n: float) -> str:
    for unit in ("bytes", "KiB", "MiB", "GiB", "TiB"):
        if n < 1024 or unit == "TiB":
            return f"{n:.0f} {unit}" if unit == "bytes" else f"{n:.1f} {unit}"
        n /= 1024
    raise AssertionError("unreachable")


def _plan(plan: dict[str, Any]) -> str:
    method = str(plan["method"])
    if "trajectories" in plan:
        method += (
            f" ({plan['trajectories']} trajectories, {plan['shots_per_trajectory']} shot(s) each)"
        )
    text = (
        f"{method}; memory {_bytes(plan['memory_bytes'])} of "
        f"{_bytes(plan['available_bytes'])} available"
    )
    if plan.get("seconds") is not None:
        text += f"; roughly {plan['seconds']:.2g} s of CPU time (an estimate)"
    return text


def _prob(report: PreflightReport) -> str:
    p = report.success_probability
    if p is None:
        return "-"
    if p > 0:
        return f"{p:.4g}"
    return f"10^{report.log10_success_probability:.1f}"


def preflight(
    circuit: Circuit, the_backend: Backend, *, name: str, shots: int, source: str,
    inputs: Bindings | None = None,
) -> PreflightReport:  # fmt: skip
    """What ``check`` reports for ``circuit`` (read from ``source``, its input parameters
    bound with ``inputs``) on a backend, for ``shots`` already validated
    (:class:`~jobkeeper.options.SubmitOptions`)."""
    info = the_backend.info
    m = metrics(circuit)
    report = PreflightReport(
        file=source, circuit_hash=circuit_hash(circuit), backend=name, metrics=m,
        fits=True, shots=shots, inputs=inputs or Bindings(),
    )  # fmt: skip
    plan = getattr(the_backend, "simulation_plan", None)
    if callable(plan):
        report.simulation = dict(plan(circuit, shots))
        needed, available = report.simulation["memory_bytes"], report.simulation["available_bytes"]
        if needed > available:
            raise CircuitError(
                f"refused: {circuit.num_qubits} qubits on {name} ({report.simulation['method']}) "
                f"need {_bytes(needed)} ({report.simulation['memory_arithmetic']}), more than "
                f"the {_bytes(available)} available",
                file=source,
            )
    if circuit.num_qubits > info.max_qubits:
        report.problems.append(
            f"{circuit.num_qubits} qubits, but {name} allows at most {info.max_qubits}"
        )
    if info.native_operations is not None:
        foreign = sorted(
            set(m.operation_counts) - set(info.native_operations) - set(NON_GATE_OPERATIONS)
        )
        if foreign:
            report.problems.append(f"operations {name} does not support: {', '.join(foreign)}")
    if circuit.opaque:
        used = sorted(set(m.operation_counts) & set(circuit.opaque))
        if used:
            report.problems.append(f"opaque gates cannot run here: {', '.join(used)}")
    if m.has_mid_circuit_measurement and not info.mid_circuit_measurement:
        report.problems.append(f"{name} does not support measurement in the middle of a circuit")
    if shots > info.max_shots:
        report.problems.append(f"{shots} shots, but {name} allows at most {info.max_shots}")
    report.fits = not report.problems
    estimate = getattr(the_backend, "success_probability", None)
    if callable(estimate):
        log10_p = float(estimate(circuit))
        report.log10_success_probability = log10_p
        report.success_probability = 10.0**log10_p if log10_p > -300 else 0.0
        if log10_p < math.log10(NOISE_WARNING):
            report.warnings.append(
                "estimated probability of an error-free run is below 1%: "
                "results will be mostly noise"
            )
    if info.pricing is not None:
        report.cost = info.pricing.cost(shots)
        report.currency = info.pricing.currency
    calibration = info.calibration or {}
    gate_times = [calibration.get(k) for k in ("gate_time_1q", "gate_time_2q")]
    known = [float(t) for t in gate_times if isinstance(t, (int, float)) and t > 0]
    if known:
        # A rough upper estimate: every layer as slow as the slowest gate.
        report.duration_seconds = m.depth * max(known) * shots
    if shots < 100:
        report.warnings.append(f"{shots} shots is a small sample: only large effects will show")
    return report
