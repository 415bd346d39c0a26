"""The job key: SHA-256 of the RFC 8785 canonical JSON of everything that can change a
result (RFC 8785 test vectors are checked in test_provenance_jcs.py); the seed a job runs
with, resolved once at submission; and the one check of submission options."""

from __future__ import annotations

import hashlib
from dataclasses import replace

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from jobkeeper import SubmitOptions
from jobkeeper.exceptions import ConfigError
from jobkeeper.hashing import canonical_json
from jobkeeper.spec import JobSpec, job_key, job_keys, resolve_seed

CIRCUIT_HASH = "sha256:" + "a" * 64


def spec(**fields) -> JobSpec:
    values = {"circuit_text": "x", "circuit_hash": CIRCUIT_HASH, "backend": "statevector",
              "shots": 100, **fields}  # fmt: skip
    return JobSpec.new(**values)


def key(**fields) -> str:
    return job_key(spec(**fields), backend_config_hash="sha256:" + "b" * 64)


def test_key_is_sha256_of_the_canonical_key_document() -> None:
    one = spec(seed=2**63 - 1)
    doc = one.key_document(backend_config_hash="x")
    assert doc["seed"] == str(2**63 - 1)  # RFC 8785 §3.2.2.3: integers beyond 2^53 lose precision
    expected = "sha256:" + hashlib.sha256(canonical_json(doc)).hexdigest()
    assert job_key(one, backend_config_hash="x") == expected


def test_key_of_a_job_archived_before_seeds_were_resolved_is_unchanged() -> None:
    # Keys computed by the previous release for the same request (seed 7, and no seed):
    # deduplication against old archives rests on these staying the same.
    document = {"keyVersion": 1, "circuitHash": CIRCUIT_HASH, "backend": "statevector",
                "backendConfigHash": "x", "shots": 100, "seed": "7", "repeat": 0,
                "exact": False, "options": {}}  # fmt: skip
    assert spec(seed=7).key_document(backend_config_hash="x") == document
    assert spec().key_document(backend_config_hash="x") == {**document, "seed": None}


@pytest.mark.parametrize(
    "change",
    [{"shots": 101}, {"seed": 1}, {"repeat": 1}, {"exact": True}, {"backend": "other"},
     {"options": {"a": 1}}, {"circuit_hash": "sha256:" + "c" * 64}],
)  # fmt: skip
def test_every_field_changes_the_key(change) -> None:
    assert key(**change) != key(seed=None if "seed" not in change else 0)


def test_same_fields_same_key() -> None:
    assert key(seed=5, options={"b": 2, "a": 1}) == key(seed=5, options={"a": 1, "b": 2})


def test_a_chosen_seed_is_not_in_the_key_so_a_resubmission_deduplicates() -> None:
    first, second = spec(), spec()
    assert first.requested_seed is None and first.seed != second.seed  # 63 random bits each
    assert job_key(first, backend_config_hash="x") == job_key(second, backend_config_hash="x")


def test_repeats_get_new_reproducible_seeds() -> None:
    assert resolve_seed(7, 0) == 7
    assert resolve_seed(7, 1) == resolve_seed(7, 1) != 7
    assert resolve_seed(7, 1) != resolve_seed(7, 2)
    assert 0 <= resolve_seed(None, 3) < 2**63
    assert spec(seed=7, repeat=1).seed == resolve_seed(7, 1)


def test_the_archived_document_round_trips() -> None:
    one = spec(seed=None, repeat=2, exact=True, options={"a": 1}, rerun_of="abc")
    again = JobSpec.from_archive(
        one.document(), backend=one.backend, shots=one.shots, requested_seed=None,
        repeat=one.repeat, job_key="sha256:k",
    )  # fmt: skip
    assert again == one


def test_a_job_archived_without_a_resolved_seed_keeps_the_seed_it_ran_with() -> None:
    # Before seeds were resolved at submission, a job without a seed ran with 63 bits of
    # SHA-256 over {"jobKey": key}, and a repeat with one derived from (seed, repeat); the
    # reader recomputes exactly those. Expected values by hand with hashlib (common practice).
    old = {"circuit": "x", "circuitHash": CIRCUIT_HASH, "exact": False, "options": {}}
    key_doc = canonical_json({"jobKey": "sha256:k"})
    by_key = int(hashlib.sha256(key_doc).hexdigest()[:16], 16) >> 1
    none = JobSpec.from_archive(old, backend="b", shots=1, requested_seed=None, repeat=0,
                                job_key="sha256:k")  # fmt: skip
    assert none.seed == by_key and none.requested_seed is None
    pair = canonical_json({"seed": "7", "repeat": 1})
    repeat = JobSpec.from_archive(old, backend="b", shots=1, requested_seed="7", repeat=1,
                                  job_key="sha256:k")  # fmt: skip
    assert repeat.seed == int(hashlib.sha256(pair).hexdigest()[:16], 16) >> 1
    assert repeat.requested_seed == 7


@pytest.mark.parametrize(
    ("fields", "message"),
    [({"shots": 0}, "shots must be a positive whole number, got 0"),
     ({"shots": -5}, "shots must be a positive whole number, got -5"),
     ({"seed": -2}, "seed must be a whole number from 0 to 2^63-1, got -2"),
     ({"seed": 2**63}, "seed must be a whole number from 0 to 2^63-1"),
     ({"repeat": -1}, "repeat must be zero or a positive whole number, got -1"),
     ({"labels": [""]}, "a label must be a non-empty string"),
     ({"labels": ["a\nb"]}, "a label must be printable"),
     ({"timeout": 0}, "timeout must be a positive number of seconds, got 0"),
     ({"timeout": float("nan")}, "timeout must be a positive number of seconds"),
     ({"shots": "100"}, "shots: Input should be a valid integer"),
     ({"shots": True}, "shots: Input should be a valid integer"),
     ({"backend": " "}, "backend must be a backend's name"),
     ({"shot": 5}, "unknown option 'shot'")],
)  # fmt: skip
def test_bad_options_are_refused_with_one_line(fields, message) -> None:
    with pytest.raises(ConfigError) as caught:
        SubmitOptions.of(**fields)
    assert message in str(caught.value) and "\n" not in str(caught.value)


def test_a_lone_label_is_one_label() -> None:
    assert SubmitOptions.of(labels="fig3").labels == {"fig3"}
    assert SubmitOptions.of(labels=["a", "b", "a"]).labels == {"a", "b"}


@settings(max_examples=100, deadline=None)
@given(
    digest=st.one_of(
        st.binary(min_size=32, max_size=32).map(lambda b: "sha256:" + b.hex()),
        st.text(max_size=20),
    ),
    shots=st.integers(0, 10**6),
    seed=st.one_of(st.none(), st.integers(0, 2**63 - 1)),
    repeat=st.integers(0, 3),
    options=st.dictionaries(
        st.text(max_size=8), st.one_of(st.integers(-5, 5), st.text(max_size=8))
    ),
)
def test_job_keys_of_sweep_points_are_job_key(
    digest: str, shots: int, seed: int | None, repeat: int, options: dict[str, object]
) -> None:
    spec = JobSpec.new(
        circuit_text="", circuit_hash="sha256:" + "0" * 64, backend="statevector", shots=shots,
        seed=seed, repeat=repeat, options=options,
    )  # fmt: skip
    config = "sha256:" + "ab" * 32
    fast = job_keys(spec, backend_config_hash=config)
    assert fast(digest) == job_key(replace(spec, circuit_hash=digest), backend_config_hash=config)
