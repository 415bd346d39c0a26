"""What to run (:class:`JobSpec`) and its job key.

The job key is what deduplication rests on: ``sha256:`` of the RFC 8785 canonical JSON of
everything that can change a result — the circuit hash, the backend's name and the hash of
its configuration, shots, seed (as a string: RFC 8785 refuses integers above 2^53−1),
repeat index, exact flag and backend options. Two submissions with the same key are the
same job; a user who wants another sample asks for it with a new repeat index.

``key_version`` leaves room for later fields (parameterised circuits, sweeps): a new field
joins the key under a new version, so keys made before it keep their meaning.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from jobkeeper.circuit.ir import Circuit
from jobkeeper.exceptions import ConfigError
from jobkeeper.hashing import digest_of

KEY_VERSION = 1


@dataclass(frozen=True)
class JobSpec:
    """One job: a circuit on a backend with shots, seed, repeat index and options."""

    circuit: Circuit
    backend: str
    shots: int
    seed: int | None = None
    repeat: int = 0
    exact: bool = False
    options: Mapping[str, Any] = field(default_factory=dict)
    #: the job this one re-executes (``jobkeeper rerun``): a rerun must run, not dedup.
    rerun_of: str | None = None

    def __post_init__(self) -> None:
        if self.shots <= 0:
            raise ConfigError(f"shots must be a positive whole number, got {self.shots}")
        if self.seed is not None and not 0 <= self.seed < 2**63:
            raise ConfigError(f"seed must be a whole number from 0 to 2^63-1, got {self.seed}")
        if self.repeat < 0:
            raise ConfigError(f"repeat must be zero or positive, got {self.repeat}")

    def key_document(self, *, circuit_hash: str, backend_config_hash: str) -> dict[str, Any]:
        """The JSON object whose canonical form is hashed into the job key."""
        document: dict[str, Any] = {
            "keyVersion": KEY_VERSION,
            "circuitHash": circuit_hash,
            "backend": self.backend,
            "backendConfigHash": backend_config_hash,
            "shots": self.shots,
            "seed": None if self.seed is None else str(self.seed),
            "repeat": self.repeat,
            "exact": self.exact,
            "options": dict(self.options),
        }
        if self.rerun_of is not None:
            document["rerunOf"] = self.rerun_of
        return document


def job_key(spec: JobSpec, *, circuit_hash: str, backend_config_hash: str) -> str:
    """``sha256:<hex>`` of the RFC 8785 canonical JSON of the spec's key document."""
    return digest_of(
        spec.key_document(circuit_hash=circuit_hash, backend_config_hash=backend_config_hash)
    )


def effective_seed(seed: int | None, repeat: int) -> int | None:
    """The seed a backend is given. Repeat 0 runs with the user's seed as given; a later
    repeat with a fixed seed must still be a new sample, so its seed is derived from the
    pair (seed, repeat) — reproducibly, and recorded in the manifest."""
    if seed is None or repeat == 0:
        return seed
    derived = digest_of({"seed": str(seed), "repeat": repeat})
    return int(derived.removeprefix("sha256:")[:16], 16) >> 1  # 63 bits fit any int64 field
