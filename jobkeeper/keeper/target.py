"""Where and how one submission's jobs run (:class:`JobTarget`): the backend, its shots
and the submitter's code version, checked once, and each job's spec and key made from a
bound circuit."""

from __future__ import annotations

import uuid
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from jobkeeper.store import NewJob

if TYPE_CHECKING:
    from jobkeeper.backend import BackendInfo
    from jobkeeper.circuit import Circuit, Template
    from jobkeeper.options import SubmitOptions
    from jobkeeper.sweeps import Bindings


@dataclass(frozen=True)
class JobTarget:
    """A submission's backend (name and description), shots, options and code version."""

    name: str
    info: BackendInfo
    shots: int
    options: SubmitOptions
    code_version: Mapping[str, Any]
    max_attempts: int

    def job(
        self, circuit: Circuit, bindings: Bindings | None = None,
        template: Template | None = None, rerun_of: str | None = None,
        register_names: tuple[str, ...] | None = None,
    ) -> NewJob:  # fmt: skip
        """The job that runs ``circuit`` (bound from ``template`` with ``bindings``);
        its registers keep the names the circuit declares unless ``register_names``."""
        from jobkeeper.circuit import canonical_text
        from jobkeeper.hashing import sha256_tag
        from jobkeeper.spec import JobSpec, job_key

        options = self.options
        text = canonical_text(circuit)
        spec = JobSpec.new(
            circuit_text=text, circuit_hash=sha256_tag(text.encode("utf-8")), backend=self.name,
            shots=self.shots, seed=options.seed, repeat=options.repeat, exact=options.exact,
            options=options.backend_options, source_hash=circuit.source_hash,
            source_name=circuit.source_name, code_version=self.code_version, rerun_of=rerun_of,
            bindings=bindings, template_hash=None if template is None else template.source_hash,
            template_text=None if template is None else template.text,
            register_names=(
                tuple(reg.name for reg in circuit.cregs) if register_names is None
                else register_names
            ),
        )  # fmt: skip
        pricing = self.info.pricing
        return NewJob(
            id=uuid.uuid4().hex,
            spec=spec,
            labels=tuple(sorted(options.labels)),
            cost=pricing.cost(self.shots) if pricing is not None else None,
            job_key=job_key(spec, backend_config_hash=self.info.config_hash),
            max_attempts=self.max_attempts,
        )
