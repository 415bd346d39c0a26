"""A noise model from a device's calibration snapshot, and where it came from.

A simulator declared with ``noise_from = "NAME"`` takes its noise from the latest
calibration snapshot that the REST backend NAME archived with a finished job (a live
fetch only with ``noise_refresh = true``); the keep finds the snapshot and hands it to the
simulator's configuration (``Keeper.backend``). The snapshot is the REST adapter's
``{"device", "fetched_at", "data"}``; the mapping reads these fields of ``data`` (the
loopback device's calibration format, ours), each optional:

==========================  =========================================================
``t1_us`` / ``t2_us``       per-qubit T1 / T2 in µs → ``t1`` / ``t2`` in seconds; a T2
                            above 2·T1 (not physical) is lowered to 2·T1, and said so
``readout_error``           one probability or one per qubit → ``readout_error``
``single_qubit_gate_error`` average gate infidelity r of one-qubit gates (the figure
``two_qubit_gate_error``    randomized benchmarking reports) → depolarizing p: the
                            process infidelity (d+1)/d · r (d = 2^k; Nielsen, Phys.
                            Lett. A 303, 249 (2002)) less the part that relaxation
                            over the gate's duration already gives (its process
                            infidelity on the average qubit), never below 0
``gate_time_1q_ns``         one-qubit gate duration (also ``id``) → ``gate_time_1q``
``gate_time_2q_ns``         two-qubit gate duration → ``gate_time_2q``
``readout_time_ns``         measurement duration → ``gate_time_readout``
==========================  =========================================================

Without gate durations T1 and T2 cannot act and are left out (the mapping says so). The
mapping's steps, the snapshot's SHA-256 digest (RFC 8785 canonical JSON), its device
and time are kept as the noise's ``derived_from``, which every result's metadata and
manifest records.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from pydantic import BaseModel, ConfigDict, StrictBool, model_validator

from jobkeeper.exceptions import ConfigError
from jobkeeper.hashing import digest_of

#: configuration keys of a simulator's noise source.
SOURCE_KEYS = ("noise_from", "noise_refresh", "noise_snapshot")


class NoiseSourceOptions(BaseModel):
    """``noise_from`` (a REST backend's name), ``noise_refresh`` (fetch live rather than
    read the archive) and ``noise_snapshot`` (filled in by the keep)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    noise_from: str | None = None
    noise_refresh: StrictBool = False
    noise_snapshot: dict[str, Any] | None = None

    @model_validator(mode="after")
    def _source(self) -> NoiseSourceOptions:
        if self.noise_from is None and (self.noise_refresh or self.noise_snapshot):
            raise ValueError("noise_refresh and noise_snapshot go with noise_from")
        return self


def _seconds(value: Any, per_second: float, key: str) -> float | list[float]:
    # Divided, not multiplied by 1e-6: 109 µs stays 0.000109, not 0.00010899999999999999.
    if isinstance(value, list):
        return [_number(v, key) / per_second for v in value]
    return _number(value, key) / per_second


def _number(value: Any, key: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise ConfigError(f"calibration snapshot: {key} holds {value!r}, not a number")
    return float(value)


def _relaxation_infidelity(t1: float | None, t2: float | None, duration: float) -> float:
    """1 − process fidelity of damping and dephasing over ``duration`` on one qubit:
    (1 + 2·e^{−t/T2} + e^{−t/T1}) / 4 (the fidelity noise.log10_success_probability uses)."""
    decay1 = 1.0 if t1 is None else math.exp(-duration / t1)
    decay2 = math.sqrt(decay1) if t2 is None else math.exp(-duration / t2)
    return 1.0 - (1.0 + 2.0 * decay2 + decay1) / 4.0


def _mean(value: float | list[float] | None) -> float | None:
    if isinstance(value, list):
        return sum(value) / len(value) if value else None
    return value


def noise_table_from_snapshot(snapshot: Mapping[str, Any]) -> tuple[dict[str, Any], list[str]]:
    """The noise table (keys of :data:`.noise.NOISE_KEYS`) that ``snapshot`` describes,
    and the mapping's steps in words. Raises ConfigError on a malformed snapshot."""
    data = snapshot.get("data", snapshot)
    if not isinstance(data, Mapping):
        raise ConfigError("calibration snapshot: its data is not a table")
    table: dict[str, Any] = {}
    steps: list[str] = []
    times = {
        "gate_time_1q": "gate_time_1q_ns",
        "gate_time_2q": "gate_time_2q_ns",
        "gate_time_readout": "readout_time_ns",
    }
    for key, field in times.items():
        if field in data:
            table[key] = _seconds(data[field], 1e9, field)
            steps.append(f"{key} = {field} × 1e-9 s")
    if "readout_error" in data:
        value = data["readout_error"]
        table["readout_error"] = (
            [_number(v, "readout_error") for v in value]
            if isinstance(value, list)
            else _number(value, "readout_error")
        )
        steps.append("readout_error = readout_error")
    t1 = _seconds(data["t1_us"], 1e6, "t1_us") if "t1_us" in data else None
    t2 = _seconds(data["t2_us"], 1e6, "t2_us") if "t2_us" in data else None
    if t1 is not None and t2 is not None:
        t1s = t1 if isinstance(t1, list) else [t1]
        t2s = t2 if isinstance(t2, list) else [t2]
        if len(t1s) == len(t2s):
            capped = [min(b, 2.0 * a) for a, b in zip(t1s, t2s, strict=True)]
            lowered = [q for q, (a, b) in enumerate(zip(t2s, capped, strict=True)) if a != b]
            if lowered:
                steps.append(f"t2 lowered to 2·t1 (T2 ≤ 2·T1) on qubits {lowered}")
            t2 = capped if isinstance(t2, list) else capped[0]
    have_times = "gate_time_1q" in table and "gate_time_2q" in table
    if (t1 is not None or t2 is not None) and not have_times:
        steps.append("t1/t2 left out: the snapshot gives no gate durations for them to act over")
        t1 = t2 = None
    if t1 is not None:
        table["t1"] = t1
        steps.append("t1 = t1_us × 1e-6 s")
    if t2 is not None:
        table["t2"] = t2
        steps.append("t2 = t2_us × 1e-6 s")
    mean_t1, mean_t2 = _mean(t1), _mean(t2)
    for arity, field, key in (
        (1, "single_qubit_gate_error", "depolarizing_1q"),
        (2, "two_qubit_gate_error", "depolarizing_2q"),
    ):
        if field not in data:
            continue
        r = _number(data[field], field)
        d = 2**arity
        total = (d + 1) / d * r
        relax = 0.0
        if have_times and (mean_t1 is not None or mean_t2 is not None):
            duration = float(table["gate_time_1q" if arity == 1 else "gate_time_2q"])
            keep = (1.0 - _relaxation_infidelity(mean_t1, mean_t2, duration)) ** arity
            relax = 1.0 - keep
        table[key] = min(1.0, max(0.0, total - relax))
        steps.append(
            f"{key} = max(0, {d + 1}/{d} × {field} − relaxation's process infidelity over "
            f"the gate ({relax:.3g}))"
        )
    return table, steps


def provenance(
    backend: str, snapshot: Mapping[str, Any], steps: list[str], live: bool
) -> dict[str, Any]:
    """Where a noise model came from, as recorded with it."""
    return {
        "backend": backend,
        "device": snapshot.get("device"),
        "fetched_at": snapshot.get("fetched_at"),
        "snapshot_digest": digest_of(dict(snapshot)),
        "fetched": "live (noise_refresh)" if live else "latest archived snapshot",
        "mapping": steps,
        "mapping_doc": "jobkeeper.backends.sim.calibration",
    }


def noise_from_source(
    what: str, options: NoiseSourceOptions
) -> tuple[dict[str, Any], dict[str, Any]] | None:
    """The noise table and its provenance for a simulator with ``noise_from`` (None
    without one). ConfigError when the keep has not resolved the snapshot."""
    if options.noise_from is None:
        return None
    snapshot = options.noise_snapshot
    if snapshot is None:
        raise ConfigError(
            f"{what}: noise_from = {options.noise_from!r} is resolved by the keep (open the "
            "backend through a keep, e.g. Keeper.backend or the command line)"
        )
    live = bool(snapshot.get("live", False))
    body = {k: v for k, v in snapshot.items() if k != "live"}
    table, steps = noise_table_from_snapshot(body)
    return table, provenance(options.noise_from, body, steps, live)
