"""Provenance primitives: keys, manifests, DSSE envelopes, Merkle log, checkpoints, bundles.

Pure and storage-agnostic: callers pass bytes, mappings and paths; nothing here opens a
database. The flow a store follows::

    sealed = seal_run(counts, predicate, key)       # statement → envelope → leaf
    store sealed.envelope_bytes; tree.append(sealed.leaf_hash)
    note = sign_checkpoint(origin, tree.size, tree.root(), key)   # now and then
    verify_log(entries, notes, keys) -> VerifyReport
    make_bundle(tree, {index: envelope}, keys, note) → write_bundle / read_bundle / verify_bundle
"""

from jobkeeper.provenance.bundle import (
    FORMAT as BUNDLE_FORMAT,
)
from jobkeeper.provenance.bundle import (
    Bundle,
    BundleEntry,
    make_bundle,
    read_bundle,
    verify_bundle,
    write_bundle,
)
from jobkeeper.provenance.checkpoint import (
    Checkpoint,
    NoteVerifier,
    format_checkpoint,
    note_key_id,
    parse_checkpoint,
    parse_verifier_key,
    sign_checkpoint,
    sign_note,
    verifier_key_string,
    verify_checkpoint,
    verify_note,
)
from jobkeeper.provenance.dsse import (
    PAYLOAD_TYPE,
    KeyTable,
    VerifiedEnvelope,
    envelope_bytes,
    key_table,
    pae,
    sign_envelope,
    verify_envelope,
    verify_envelope_detailed,
)
from jobkeeper.provenance.keys import (
    KeyRing,
    PublicKeyRecord,
    fingerprint,
    generate_key,
    load_public_key,
    load_signing_key,
    public_key_bytes,
    sign_bytes,
    verify_signature,
)
from jobkeeper.provenance.log import LogEntry, SealedRun, seal_run, verify_log
from jobkeeper.provenance.manifest import (
    COMPARISON_PREDICATE_TYPE,
    PREDICATE_TYPE,
    RUN_PREDICATE_TYPE,
    STATEMENT_TYPE,
    RunPredicate,
    build_statement,
    counts_digest,
    counts_document,
    git_code_version,
    parse_statement,
    statement_bytes,
    verify_subject,
)
from jobkeeper.provenance.merkle import (
    EMPTY_ROOT,
    MerkleTree,
    consistency_proof,
    inclusion_proof,
    leaf_hash,
    node_hash,
    root,
    verify_consistency,
    verify_inclusion,
)
from jobkeeper.provenance.report import VerifyReport

__all__ = [
    "BUNDLE_FORMAT",
    "COMPARISON_PREDICATE_TYPE",
    "EMPTY_ROOT",
    "PAYLOAD_TYPE",
    "PREDICATE_TYPE",
    "RUN_PREDICATE_TYPE",
    "STATEMENT_TYPE",
    "Bundle",
    "BundleEntry",
    "Checkpoint",
    "KeyRing",
    "KeyTable",
    "LogEntry",
    "MerkleTree",
    "NoteVerifier",
    "PublicKeyRecord",
    "RunPredicate",
    "SealedRun",
    "VerifiedEnvelope",
    "VerifyReport",
    "build_statement",
    "consistency_proof",
    "counts_digest",
    "counts_document",
    "envelope_bytes",
    "fingerprint",
    "format_checkpoint",
    "generate_key",
    "git_code_version",
    "inclusion_proof",
    "key_table",
    "leaf_hash",
    "load_public_key",
    "load_signing_key",
    "make_bundle",
    "node_hash",
    "note_key_id",
    "pae",
    "parse_checkpoint",
    "parse_statement",
    "parse_verifier_key",
    "public_key_bytes",
    "read_bundle",
    "root",
    "seal_run",
    "sign_bytes",
    "sign_checkpoint",
    "sign_envelope",
    "sign_note",
    "statement_bytes",
    "verifier_key_string",
    "verify_bundle",
    "verify_checkpoint",
    "verify_consistency",
    "verify_envelope",
    "verify_envelope_detailed",
    "verify_inclusion",
    "verify_log",
    "verify_note",
    "verify_signature",
    "verify_subject",
    "write_bundle",
]
