"""The job key: SHA-256 of the RFC 8785 canonical JSON of everything that can change a
result (RFC 8785 test vectors are checked in test_provenance_jcs.py)."""

from __future__ import annotations

import hashlib

import pytest

from jobkeeper.circuit import parse_qasm
from jobkeeper.exceptions import ConfigError
from jobkeeper.hashing import canonical_json
from jobkeeper.spec import JobSpec, effective_seed, job_key

BELL = 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c[2];\nh q[0];\ncx q[0],q[1];\n'
CIRCUIT = parse_qasm(BELL)


def key(**fields) -> str:
    spec = JobSpec(**{"circuit": CIRCUIT, "backend": "statevector", "shots": 100, **fields})
    return job_key(
        spec, circuit_hash="sha256:" + "a" * 64, backend_config_hash="sha256:" + "b" * 64
    )


def test_key_is_sha256_of_the_canonical_key_document() -> None:
    spec = JobSpec(circuit=CIRCUIT, backend="statevector", shots=100, seed=2**63 - 1)
    doc = spec.key_document(circuit_hash="sha256:" + "a" * 64, backend_config_hash="x")
    assert doc["seed"] == str(2**63 - 1)  # RFC 8785 §3.2.2.3: integers beyond 2^53 lose precision
    expected = "sha256:" + hashlib.sha256(canonical_json(doc)).hexdigest()
    assert job_key(spec, circuit_hash="sha256:" + "a" * 64, backend_config_hash="x") == expected


@pytest.mark.parametrize(
    "change",
    [{"shots": 101}, {"seed": 1}, {"repeat": 1}, {"exact": True}, {"backend": "other"},
     {"options": {"a": 1}}],
)  # fmt: skip
def test_every_field_changes_the_key(change) -> None:
    assert key(**change) != key()


def test_same_fields_same_key() -> None:
    assert key(seed=5, options={"b": 2, "a": 1}) == key(seed=5, options={"a": 1, "b": 2})


def test_bad_specs_are_refused() -> None:
    for bad in ({"shots": 0}, {"shots": -1}, {"seed": -2}, {"repeat": -1}):
        with pytest.raises(ConfigError):
            key(**bad)


def test_repeats_get_new_reproducible_seeds() -> None:
    assert effective_seed(7, 0) == 7
    assert effective_seed(7, 1) == effective_seed(7, 1) != 7
    assert effective_seed(7, 1) != effective_seed(7, 2)
    assert effective_seed(None, 3) is None
