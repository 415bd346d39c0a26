"""What to run (:class:`JobSpec`), its job key, and the seed it runs with.

A :class:`JobSpec` is made once, when a job is submitted (from validated
:class:`~jobkeeper.options.SubmitOptions`), and archived with the job; the worker builds
its task from it, the sealer signs it, and every reader shows it. It is never rebuilt from
the user's files.

The seed is resolved once, at submission (:func:`resolve_seed`), and kept as an integer in
``JobSpec.seed``: it is what the backend is given, what the manifest records and what
every command prints. Repeat 0 runs with the user's seed as given; a later repeat with a
fixed seed must still be a new sample, so its seed is derived from the pair (seed, repeat),
reproducibly; a job submitted without a seed gets a fresh random one. A restarted job runs
with the stored seed, so running it again after a crash cannot give a different answer.

The job key is what deduplication rests on: ``sha256:`` of the RFC 8785 canonical JSON of
everything the user asked for that can change a result — the circuit hash, the backend's
name and the hash of its configuration, shots, the seed *as given* (``None`` when none was
given, so a resubmission without a seed finds the same job; as a string, because RFC 8785
refuses integers above 2^53−1), repeat index, exact flag and backend options.
``key_version`` leaves room for later fields: a new field joins the key under a new
version, so keys made before it keep their meaning.

A job bound from a program with ``input`` parameters also keeps its :class:`Bindings`
(each value's text as given and the number it means) and its template (the program's
hash and text). Neither joins the key: the bound circuit's hash already says what runs,
so a sweep point and the same operations written with literal values are one job.
"""

from __future__ import annotations

import re
import secrets
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from typing import Any

from jobkeeper.hashing import canonical_json, digest_of, sha256_tag
from jobkeeper.sweeps.bindings import Bindings, Value

KEY_VERSION = 1
#: A seed must fit a signed 64-bit integer wherever a device stores it.
SEED_BITS = 63


def _derived_seed(document: Mapping[str, Any]) -> int:
    """63 bits of the SHA-256 of a document's canonical JSON: a reproducible seed."""
    return int(digest_of(document).removeprefix("sha256:")[:16], 16) >> (64 - SEED_BITS)


def resolve_seed(requested: int | None, repeat: int) -> int:
    """The seed a job runs with, given the seed the user asked for (if any)."""
    if requested is None:
        return secrets.randbits(SEED_BITS)
    if repeat == 0:
        return requested
    return _derived_seed({"seed": str(requested), "repeat": repeat})


def _archived_seed(requested: int | None, repeat: int, job_key: str) -> int:
    """The seed of a job archived before seeds were resolved at submission: such a job
    without a seed ran (or will run) with one derived from its job key, as it always did."""
    if requested is None:
        return _derived_seed({"jobKey": job_key})
    return resolve_seed(requested, repeat)


@dataclass(frozen=True, slots=True)
class JobSpec:
    """One job as archived: a circuit (canonical text and hash) on a backend, with shots,
    the seed it runs with, repeat index, exact flag and backend options, plus where it came
    from (source file hash and name, the user's code version) and, for a rerun, the job it
    re-executes."""

    circuit_text: str
    circuit_hash: str
    backend: str
    shots: int
    #: the seed the backend is given, resolved at submission (see :func:`resolve_seed`)
    seed: int
    #: the seed the user asked for; None when none was given (part of the job key)
    requested_seed: int | None = None
    repeat: int = 0
    exact: bool = False
    options: Mapping[str, Any] = field(default_factory=dict)
    source_hash: str | None = None
    source_name: str | None = None
    code_version: Mapping[str, Any] | None = None
    #: the job this one re-executes (``rerun``): a rerun must run, not deduplicate.
    rerun_of: str | None = None
    #: the values its program's inputs were bound with (None: a program without inputs)
    bindings: Bindings | None = None
    #: the program the circuit was bound from: ``sha256:`` of its text, and the text
    template_hash: str | None = None
    template_text: str | None = None
    #: the classical registers' names as the user declared them, in declaration order
    #: (the canonical text calls them c0, c1, …): the register layout the manifest
    #: records. Not part of the job key, as register names are not part of the circuit
    #: hash: a job found again keeps the names it was first submitted with.
    register_names: tuple[str, ...] = ()

    @classmethod
    def new(
        cls, *, circuit_text: str, circuit_hash: str, backend: str, shots: int,
        seed: int | None = None, repeat: int = 0, exact: bool = False,
        options: Mapping[str, Any] | None = None, source_hash: str | None = None,
        source_name: str | None = None, code_version: Mapping[str, Any] | None = None,
        rerun_of: str | None = None, bindings: Bindings | None = None,
        template_hash: str | None = None, template_text: str | None = None,
        register_names: tuple[str, ...] = (),
    ) -> JobSpec:  # fmt: skip
        """A job being submitted: ``seed`` is what the user asked for (or None), and the
        seed the job runs with is resolved here, once."""
        return cls(
            circuit_text=circuit_text, circuit_hash=circuit_hash, backend=backend, shots=shots,
            seed=resolve_seed(seed, repeat), requested_seed=seed, repeat=repeat, exact=exact,
            options=dict(options or {}), source_hash=source_hash, source_name=source_name,
            code_version=code_version, rerun_of=rerun_of, bindings=bindings,
            template_hash=template_hash, template_text=template_text,
            register_names=register_names,
        )  # fmt: skip

    def bindings_json(self) -> dict[str, float | int] | None:
        """Input name → number, JSON-ready (None for a program without inputs)."""
        return None if self.bindings is None else self.bindings.numbers()

    def key_document(self, *, backend_config_hash: str) -> dict[str, Any]:
        """The JSON object whose canonical form is hashed into the job key."""
        document: dict[str, Any] = {
            "keyVersion": KEY_VERSION,
            "circuitHash": self.circuit_hash,
            "backend": self.backend,
            "backendConfigHash": backend_config_hash,
            "shots": self.shots,
            "seed": None if self.requested_seed is None else str(self.requested_seed),
            "repeat": self.repeat,
            "exact": self.exact,
            "options": dict(self.options),
        }
        if self.rerun_of is not None:
            document["rerunOf"] = self.rerun_of
        return document

    # -- the archived form --------------------------------------------------------------
    # The jobs table keeps backend, shots, the requested seed and repeat in columns and the
    # rest in one JSON document, whose member names are those archives have always had.

    def document(self) -> dict[str, Any]:
        """The JSON document archived beside the columns (see :meth:`from_archive`)."""
        document: dict[str, Any] = {
            "circuit": self.circuit_text,
            "circuitHash": self.circuit_hash,
            "sourceHash": self.source_hash,
            "sourceName": self.source_name,
            "exact": self.exact,
            "options": dict(self.options),
            "codeVersion": None if self.code_version is None else dict(self.code_version),
            "rerunOf": self.rerun_of,
            # A JSON integer: Python's json and PostgreSQL read 63-bit integers exactly.
            "seed": self.seed,
            "registerNames": list(self.register_names),
        }
        if self.bindings is not None:
            # A list, in declaration order (the document is written with sorted keys).
            document["bindings"] = bindings_document(self.bindings)
            document["template"] = {"hash": self.template_hash, "text": self.template_text}
        return document

    @classmethod
    def from_archive(
        cls, document: Mapping[str, Any], *, backend: str, shots: int,
        requested_seed: str | None, repeat: int, job_key: str,
    ) -> JobSpec:  # fmt: skip
        """The spec of an archived job: its columns and its JSON document."""
        requested = None if requested_seed is None else int(requested_seed)
        seed = document.get("seed")
        template = document.get("template") or {}
        return cls(
            circuit_text=str(document.get("circuit") or ""),
            circuit_hash=str(document.get("circuitHash") or ""),
            backend=backend,
            shots=shots,
            seed=int(seed) if seed is not None else _archived_seed(requested, repeat, job_key),
            requested_seed=requested,
            repeat=repeat,
            exact=bool(document.get("exact", False)),
            options=dict(document.get("options") or {}),
            source_hash=document.get("sourceHash"),
            source_name=document.get("sourceName"),
            code_version=document.get("codeVersion"),
            rerun_of=document.get("rerunOf"),
            bindings=bindings_of(document.get("bindings")),
            template_hash=template.get("hash"),
            template_text=template.get("text"),
            register_names=tuple(str(n) for n in document.get("registerNames") or ()),
        )


def bindings_document(bindings: Bindings) -> list[dict[str, Any]]:
    """Bindings as archived: ``[{"name", "text", "value"}, …]`` in declaration order."""
    return [{"name": name, "text": value.text, "value": value.number}
            for name, value in bindings.items()]  # fmt: skip


def bindings_of(document: Any) -> Bindings | None:
    """The Bindings of an archived list (:func:`bindings_document`); None when absent."""
    if not isinstance(document, list):
        return None
    return Bindings(
        (str(item["name"]), Value(str(item["text"]), item["value"]))
        for item in document
        if isinstance(item, dict)
    )


def job_key(spec: JobSpec, *, backend_config_hash: str) -> str:
    """``sha256:<hex>`` of the RFC 8785 canonical JSON of the spec's key document."""
    return digest_of(spec.key_document(backend_config_hash=backend_config_hash))


_CIRCUIT_HASH = re.compile(r"sha256:[0-9a-f]{64}")
_PLACEHOLDER = "jobkeeper:circuit-hash-of-the-point"


def job_keys(spec: JobSpec, *, backend_config_hash: str) -> Callable[[str], str]:
    """``job_key`` of specs that differ from ``spec`` only in their circuit hash (the
    points of a sweep), given that hash: the key document's canonical JSON is written
    once around the hash and each key is one SHA-256 (a sweep of a thousand points
    would otherwise write a thousand documents). Equal to :func:`job_key` of the spec
    with that circuit hash, always: anything unusual takes :func:`job_key` itself."""
    document = replace(spec, circuit_hash=_PLACEHOLDER).key_document(
        backend_config_hash=backend_config_hash
    )
    text = canonical_json(document).decode("utf-8")
    quoted = f'"{_PLACEHOLDER}"'
    if text.count(quoted) != 1:
        return lambda digest: job_key(
            replace(spec, circuit_hash=digest), backend_config_hash=backend_config_hash
        )
    head, tail = text.split(quoted)

    def key(digest: str) -> str:
        if _CIRCUIT_HASH.fullmatch(digest) is None:
            return job_key(
                replace(spec, circuit_hash=digest), backend_config_hash=backend_config_hash
            )
        return sha256_tag(f'{head}"{digest}"{tail}'.encode())

    return key
