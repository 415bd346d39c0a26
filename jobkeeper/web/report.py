"""The referee's report: one self-contained HTML file made from a bundle.

It says what was verified and how (the same checks as ``jobkeeper verify BUNDLE``: each
envelope's Ed25519 signature, each subject digest against the signed counts, each log
inclusion proof against the signed checkpoint, and whether the signers are trusted), with
the exact command that repeats them; then every record of the bundle with its figure and
its signed manifest. The signers' fingerprints stand at the top: a referee compares them
with the fingerprint the author gave by another channel.

Self-contained: the stylesheet is inline, figures are inline SVG, there is no script, and
a Content-Security-Policy in the page forbids fetching anything at all.
"""

from __future__ import annotations

import hashlib
import json
import shlex
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from markupsafe import Markup

from jobkeeper._version import __version__
from jobkeeper.exceptions import ProvenanceError, VerificationError
from jobkeeper.outputs import write_output
from jobkeeper.provenance.batch import BATCH_PREDICATE_TYPE, point_statement
from jobkeeper.provenance.bundle import Bundle, read_bundle
from jobkeeper.provenance.checkpoint import parse_checkpoint, split_note
from jobkeeper.provenance.dsse import b64decode_strict
from jobkeeper.provenance.manifest import RUN_PREDICATE_TYPES
from jobkeeper.web.app import stylesheet, templates
from jobkeeper.web.figures import FigureSource, Histogram, histogram_figure, inline_svg
from jobkeeper.web.views import manifest_fields, report_view

if TYPE_CHECKING:
    from jobkeeper.audit.trust import TrustSet

REPORT_CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:"


@dataclass(frozen=True)
class ReportSummary:
    path: Path
    records: int
    ok: bool
    signers: tuple[str, ...]


def write_report(
    bundle_path: Path, output: Path, *, trusted: Iterable[str] | None = None,
    trust_set: TrustSet | None = None, guarded: Iterable[Path] = (), force: bool = False,
) -> ReportSummary:  # fmt: skip
    """Verify ``bundle_path`` (as ``jobkeeper verify`` does, against ``trust_set`` or the
    pinned ``trusted`` fingerprints) and write its report to ``output``, never over a file
    without ``force`` (see :mod:`jobkeeper.outputs`)."""
    from jobkeeper.audit.verification import verify_bundle_file
    from jobkeeper.outputs import check_output

    check_output(output, guarded=guarded, force=force)
    raw = _read(bundle_path)
    bundle = read_bundle(bundle_path)
    trusted = None if trusted is None else list(trusted)
    report = verify_bundle_file(bundle_path, trusted=trusted, trust_set=trust_set)
    digest = "sha256:" + hashlib.sha256(raw).hexdigest()
    records = [_record(entry, n, digest) for n, entry in enumerate(bundle.entries)]
    signers = sorted({fp for record in records for fp in record["signers"]})
    pins = " ".join(f"--key {fp}" for fp in (trusted or signers))
    data = {
        "title": f"Report on {bundle_path.name}",
        "css": Markup(stylesheet()),
        "csp": REPORT_CSP,
        "bundle_name": bundle_path.name,
        "bundle_digest": digest,
        "bundle_size": len(raw),
        "report": report_view(report),
        "integrity": _integrity(report),
        "checkpoint": _checkpoint(bundle),
        "signers": signers,
        "keys": sorted(bundle.keys),
        "command": f"jobkeeper verify {shlex.quote(bundle_path.name)} {pins}".strip(),
        "records": records,
        "version": __version__,
    }
    html = templates().get_template("report.html").render(**data)
    write_output(output, html, guarded=guarded, force=force)
    return ReportSummary(output, len(records), report.ok, tuple(signers))


def _read(path: Path) -> bytes:
    try:
        return path.read_bytes()
    except OSError as exc:
        raise ProvenanceError(f"cannot read bundle {path}: {exc}") from exc


def _integrity(report: Any) -> list[tuple[str, str]]:
    """Each kind of check made, and its outcome: "held" only when verification found no
    problem at all (problems are listed above the table, each naming its entry)."""
    held = "held" if not report.problems else "see the problems listed above"
    trust = {True: "held", False: "NOT TRUSTED: see above", None: "not checked"}
    return [
        ("Ed25519 signature of every envelope (DSSE v1)", held),
        ("SHA-256 of every counts document against its signed subject", held),
        ("inclusion of every entry in the log (RFC 9162 proofs to the checkpoint's root)", held),
        ("the checkpoint's signature and origin", held),
        ("every signer trusted by this verifier", trust[report.signer_trusted]),
    ]


def _checkpoint(bundle: Bundle) -> dict[str, Any]:
    try:
        cp = parse_checkpoint(split_note(bundle.checkpoint)[0])
    except VerificationError as exc:
        return {"problem": str(exc), "note": bundle.checkpoint}
    return {"origin": cp.origin, "size": cp.size, "root": cp.root.hex(), "note": bundle.checkpoint}


def _record(entry: Any, n: int, digest: str) -> dict[str, Any]:
    """One entry as the report shows it, read from its payload (which the verification
    above checked; a payload that cannot be read is shown as such, not trusted)."""
    envelope = entry.envelope
    signers = [
        str(s.get("keyid", "")) for s in envelope.get("signatures", []) if isinstance(s, Mapping)
    ]
    base: dict[str, Any] = {"index": entry.index, "record": entry.record, "signers": signers,
                            "anchor": f"entry-{n}"}  # fmt: skip
    try:
        statement = json.loads(b64decode_strict(envelope.get("payload", ""), "payload"))
        if statement.get("predicateType") == BATCH_PREDICATE_TYPE and entry.documents:
            # A batch's entry: shown as the point it was bundled for (its counts are the
            # document the verification above checked against the point's subject).
            key, document = sorted(entry.documents.items())[0]
            statement = point_statement(statement, key)
            statement["predicate"]["counts"] = json.loads(document)
        predicate = statement["predicate"]
    except (VerificationError, ValueError, KeyError, TypeError):
        return {**base, "kind": "unreadable", "fields": [], "figure": None, "counts": []}
    kind = "job" if statement.get("predicateType") in RUN_PREDICATE_TYPES else "comparison"
    fields = manifest_fields(statement)
    record: dict[str, Any] = {**base, "kind": kind, "fields": fields, "figure": None, "counts": []}
    if kind == "job" and isinstance(predicate.get("counts"), Mapping):
        counts = {str(k): int(v) for k, v in predicate["counts"].items()}
        shots = int(predicate.get("shots") or sum(counts.values()))
        name = entry.record or str(predicate.get("jobKey", ""))
        record["job_key"] = predicate.get("jobKey")
        record["circuit"] = predicate.get("circuit", {}).get("canonicalText")
        record["counts"] = sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))
        record["shots"] = shots
        if counts:
            source = FigureSource("job", name, digest)
            title = f"job {name[:12]} · {predicate.get('backend', {}).get('name', '')}"
            figure = histogram_figure(Histogram(title, counts, shots), source)
            record["figure"] = Markup(inline_svg(figure, source, prefix=f"e{n}-"))
    return record


__all__ = ["REPORT_CSP", "ReportSummary", "write_report"]
