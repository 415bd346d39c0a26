"""Options and noise of the two noisy simulators (density matrix, trajectories), and
their common base :class:`NoisySimulator`.

Both read the same config keys and take their noise from one of three places — the
top-level noise keys, a ``calibration`` table, or another backend's snapshot named by
``noise_from`` — so the reading lives here once.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, Self, TypeVar

from pydantic import model_validator

from jobkeeper.backend import Pricing
from jobkeeper.backends.sim.base import (
    PricingTable,
    ProgramT,
    Simulator,
    SimulatorOptions,
    parse_options,
)
from jobkeeper.backends.sim.calibration import NoiseSourceOptions, noise_from_source
from jobkeeper.backends.sim.noise import (
    NOISE_KEYS,
    NoiseModel,
    NoiseTable,
    noise_model_from_calibration,
)
from jobkeeper.exceptions import ConfigError


class NoisyOptions(NoiseTable, NoiseSourceOptions, SimulatorOptions):
    """The config keys a noisy simulator shares with the other one."""

    pricing: PricingTable | None = None
    calibration: dict[str, Any] | None = None

    @model_validator(mode="after")
    def _one_source(self) -> Self:
        if self.calibration is not None:
            top = sorted(set(NOISE_KEYS) & self.model_fields_set)
            if top:
                raise ValueError(
                    f"noise is given both at top level ({', '.join(top)}) and in calibration; "
                    "give it in one place"
                )
        return self


Options = TypeVar("Options", bound=NoisyOptions)


def parse_noisy(
    options_type: type[Options], what: str, config: Mapping[str, Any]
) -> tuple[Options, NoiseModel, dict[str, Any] | None]:
    """The options, the noise model and, with ``noise_from``, the snapshot's provenance."""
    table = parse_options(options_type, what, config)
    source = noise_from_source(what, table)
    if source is not None:
        if table.calibration is not None or set(NOISE_KEYS) & table.model_fields_set:
            raise ConfigError(f"{what}: noise_from takes the place of the noise keys; give one")
        try:
            return table, noise_model_from_calibration(source[0]), source[1]
        except ConfigError as exc:
            raise ConfigError(f"{what}: from {table.noise_from!r}'s snapshot: {exc}") from None
    if table.calibration is not None:
        try:
            noise = noise_model_from_calibration(table.calibration)
        except ConfigError as exc:
            raise ConfigError(f"{what}: {exc}") from None
    else:
        noise = noise_model_from_calibration(
            {k: getattr(table, k) for k in NOISE_KEYS if k in table.model_fields_set}
        )
    return table, noise, None


class NoisySimulator(Simulator[ProgramT]):
    """A simulator with a noise model: built from a config table or from a
    :class:`NoiseModel` directly; its calibration is its noise (and, with ``noise_from``,
    where that came from)."""

    noise: NoiseModel
    #: where the noise came from (a calibration snapshot), or None.
    provenance: dict[str, Any] | None

    def _configure(
        self, options_type: type[Options], name: str, config: Mapping[str, Any] | None,
        noise: NoiseModel | None,
    ) -> Options:  # fmt: skip
        """Read ``config`` (or ``noise``) into limits, noise and pricing; the options
        for what only this simulator reads."""
        if noise is not None:
            if config is not None:
                raise ConfigError("give either a configuration or a noise model, not both")
            config = {"adapter": self.method, **noise.to_json()}
        table_config = dict(config or {"adapter": self.method})
        what = f"{self.method} backend {name!r}"
        table, self.noise, self.provenance = parse_noisy(options_type, what, table_config)
        self._set_limits(name, table_config, table)
        if self.noise.num_qubits is not None:
            self.max_qubits = min(self.max_qubits, self.noise.num_qubits)
        self.pricing = Pricing(**table.pricing.model_dump()) if table.pricing else None
        return table

    def calibration(self) -> dict[str, Any]:
        out = self.noise.to_json()
        if self.provenance is not None:
            out["derived_from"] = self.provenance
        return out
