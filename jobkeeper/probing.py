"""Probing a backend: does its device answer, does it take our credentials, can its
calibration be read, and what does its profile declare, all without submitting work.

A backend that can be probed has an ``async probe()`` returning a :class:`ProbeReport`
(the REST adapter has one); for any other backend :func:`local_report` says what it is.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Literal, Protocol, runtime_checkable

from jobkeeper.backend import BackendInfo

#: ``ok``, ``failed``, or ``skipped`` (the check does not apply, or an earlier one failed)
Outcome = Literal["ok", "failed", "skipped"]


@dataclass(frozen=True)
class ProbeCheck:
    """One check of a probe: ``reachable``, ``authentication`` or ``calibration``."""

    name: str
    outcome: Outcome
    detail: str


@dataclass(frozen=True)
class ProbeReport:
    """What a probe found, and what the backend's profile declares."""

    backend: str
    kind: str
    checks: tuple[ProbeCheck, ...]
    declared: Mapping[str, Any] = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return all(check.outcome != "failed" for check in self.checks)

    @property
    def unreachable(self) -> bool:
        return any(c.name == "reachable" and c.outcome == "failed" for c in self.checks)

    def to_json(self) -> dict[str, Any]:
        return {
            "backend": self.backend,
            "kind": self.kind,
            "ok": self.ok,
            "checks": [
                {"name": c.name, "outcome": c.outcome, "detail": c.detail} for c in self.checks
            ],
            "declared": dict(self.declared),
        }


@runtime_checkable
class Probeable(Protocol):
    """A backend whose device can be probed without submitting work."""

    async def probe(self) -> ProbeReport: ...


def local_report(info: BackendInfo) -> ProbeReport:
    """The report for a backend with nothing to reach (a simulator on this machine)."""
    return ProbeReport(
        backend=info.name,
        kind=info.kind,
        checks=(ProbeCheck("reachable", "skipped", "runs on this machine; nothing to reach"),),
        declared={"version": info.version, "max_qubits": info.max_qubits},
    )
