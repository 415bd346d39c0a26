"""Commands of proof and judgement: keys, verify, bundle, rerun, compare."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Any

import typer

from jobkeeper.cli._app import (
    BackendOpt,
    JsonOpt,
    KeepOpt,
    LabelOpt,
    StoreOpt,
    app,
    echo_json,
    open_keeper,
)
from jobkeeper.cli._progress import activity
from jobkeeper.exceptions import ConfigError

ForceOpt = Annotated[
    bool, typer.Option("--force", help="Replace the output file if it exists (never in the keep).")
]


@app.command()
def keys(
    export: Annotated[
        Path | None, typer.Option("--export", help="Write the public key here.")
    ] = None,
    rotate: Annotated[bool, typer.Option("--rotate", help="Make a new active key.")] = False,
    force: ForceOpt = False,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Show the signing key's public half and fingerprint; export or rotate it."""
    keeper = open_keeper(keep, store)
    retired = keeper.trust.rotate() if rotate else None
    record, *earlier = keeper.keys()
    public = record.public_key
    if export is not None:
        keeper.export_key(export, force=force)
    if json_out:
        extra = {} if retired is None else {"retired": retired[0], "retired_from": retired[2]}
        echo_json({"fingerprint": record.fingerprint, "public_key": public, **extra})
        return
    if retired is not None:
        typer.echo(f"retired {retired[0]}: it stays trusted for log entries before index "
                   f"{retired[2]}; the new key signs from there")  # fmt: skip
    typer.echo(f"fingerprint: {record.fingerprint}")
    typer.echo(f"public key (base64, raw Ed25519): {public}")
    if earlier:
        typer.echo(
            "earlier keys still trusted for old entries: "
            + ", ".join(r.fingerprint for r in earlier)
        )


def _verdict(report: Any) -> str:
    if report.only_trust_failed:
        return (
            "signatures, digests and the log hold, but a signer is not trusted here "
            "(a key this verifier has not trusted signed them)"
        )
    if not report.ok:
        return f"{len(report.problems) + len(report.trust_problems)} problem(s) found"
    if report.integrity_only:
        return "everything holds (integrity only: whether the signers are trusted was not checked)"
    return "everything holds"


def _print_report(report: Any, json_out: bool, what: str) -> None:
    if json_out:
        echo_json(report.to_dict())
    else:
        typer.echo(f"verified {report.checked} {what}: {_verdict(report)}")
        for problem in report.problems:
            typer.echo(f"  PROBLEM: {problem}")
        for problem in report.trust_problems:
            typer.echo(f"  UNTRUSTED SIGNER: {problem}")
    for warning in report.warnings:
        typer.echo(f"jobkeeper: warning: {warning}", err=True)
    if not report.ok:
        raise typer.Exit(1)


@app.command()
def verify(
    targets: Annotated[
        list[str] | None, typer.Argument(metavar="JOB|BUNDLE", help="Jobs, or a bundle file.")
    ] = None,
    all_jobs: Annotated[bool, typer.Option("--all", help="Every done job in the keep.")] = False,
    key: Annotated[
        list[str] | None,
        typer.Option("--key", help="Trust only this full key fingerprint, this once (repeatable)."),
    ] = None,
    integrity_only: Annotated[
        bool,
        typer.Option("--integrity-only", help="Check everything but whether signers are trusted."),
    ] = False,
    since: Annotated[
        list[Path] | None,
        typer.Option(
            "--since",
            metavar="FILE",
            help="A bundle, witness or checkpoint kept elsewhere: prove the log extends it.",
        ),
    ] = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Check signatures and their signers' trust, counts digests, log inclusion and
    checkpoint consistency."""
    from jobkeeper.audit.verification import verify_bundle_file

    targets = targets or []
    if len(targets) == 1 and Path(targets[0]).is_file():
        if since:
            raise ConfigError("--since checks a keep's log; a bundle carries its own checkpoint")
        with activity(f"verifying {targets[0]}"):
            report = verify_bundle_file(
                Path(targets[0]), trusted=key, trust_set=_keep_trust(keep),
                integrity_only=integrity_only,
            )  # fmt: skip
        _print_report(report, json_out, "bundle entries")
        return
    if not targets and not all_jobs and not since:
        raise ConfigError("give job ids, a bundle file, --all or --since FILE")
    for path in since or []:
        if not path.is_file():
            raise ConfigError(f"--since {path}: no such file")
    keeper = open_keeper(keep, store, create=False)
    what = "log entries (jobs and comparisons)" if all_jobs else "jobs"
    with activity(f"verifying {what}"):
        report = keeper.verify(
            None if all_jobs or not targets else targets, trusted=key,
            integrity_only=integrity_only, since=since or (),
        )  # fmt: skip
    _print_report(report, json_out, what)


def _keep_trust(keep: Path | None) -> Any:
    """The trusted keys of the keep at hand (--keep, JOBKEEPER_KEEP or ./.jobkeeper), or
    None when there is none: a bundle then needs --key."""
    from jobkeeper.audit.trust import load_trust
    from jobkeeper.cli._app import ROOT
    from jobkeeper.config import DEFAULT_KEEP, KEYS_DIR
    from jobkeeper.provenance.keys import KeyRing

    path = keep if keep is not None else ROOT.keep if ROOT.keep is not None else DEFAULT_KEEP
    keyring = KeyRing(path / KEYS_DIR)
    if not keyring.exists():
        return None
    return load_trust(path, keyring)


@app.command()
def bundle(
    job_ids: Annotated[
        list[str] | None, typer.Argument(metavar="JOB", help="Jobs to export.")
    ] = None,
    label: LabelOpt = None,
    output: Annotated[
        Path, typer.Option("-o", "--output", help="The bundle file to write.")
    ] = Path("jobkeeper-bundle.json"),
    force: ForceOpt = False,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Export done jobs as one file that a referee can verify offline."""
    if label is None and not job_ids:
        raise ConfigError("give job ids or --label")
    keeper = open_keeper(keep, store, create=False)
    with activity(f"writing {output}"):
        count = keeper.bundle(output, job_ids or (), label=label, force=force)
    fp = keeper.keys()[0].fingerprint
    if json_out:
        echo_json({"bundle": str(output), "jobs": count, "fingerprint": fp})
    else:
        typer.echo(f"wrote {count} job(s) to {output}")
        typer.echo(f"a referee verifies it with: jobkeeper verify {output} --key {fp}")


@app.command()
def export(
    output: Annotated[
        Path, typer.Option("-o", "--output", help="The SQLite file to write (e.g. results.db).")
    ],
    label: Annotated[
        str | None, typer.Option("--label", help="Only jobs with this label.", show_default=False)
    ] = None,
    force: ForceOpt = False,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Write jobs and their counts to a SQLite file for analysis (tables jobs and counts,
    one row per job and per outcome). An unsigned copy: the keep holds the signed record."""
    keeper = open_keeper(keep, store, create=False)
    summary = keeper.export(output, label=label, force=force)
    if json_out:
        echo_json({"path": str(summary.path), "jobs": summary.jobs, "counts": summary.counts,
                   "probabilities": summary.probabilities})  # fmt: skip
    else:
        rows = summary.counts + summary.probabilities
        typer.echo(f"wrote {summary.jobs} job(s) and {rows} outcome row(s) to {output}")


def _print_judgement(judgement: Any, json_out: bool) -> None:
    if json_out:
        from jobkeeper.shapes import comparison_json

        echo_json(comparison_json(judgement.record, judgement.rerun_job))
    else:
        typer.echo(judgement.summary())
        typer.echo(f"archived and signed as comparison {judgement.record.id[:12]}")
    if judgement.record.verdict == "different":
        raise typer.Exit(1)


AlphaOpt = Annotated[
    float, typer.Option("--alpha", min=1e-9, max=0.5, help="Significance level of the test.")
]


@app.command()
def rerun(
    job_id: Annotated[str, typer.Argument(metavar="JOB", help="The job to run again.")],
    backend: BackendOpt = None,
    seed: Annotated[
        int | None, typer.Option("--seed", help="Another seed (default: the one used).")
    ] = None,
    alpha: AlphaOpt = 0.01,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Run a job again from its signed manifest alone, and judge the two results."""
    keeper = open_keeper(keep, store, create=False)
    with activity("running again and comparing"):
        judgement = keeper.rerun(job_id, backend=backend, seed=seed, alpha=alpha)
    _print_judgement(judgement, json_out)


@app.command()
def compare(
    job_a: Annotated[str, typer.Argument(metavar="A", help="A job.")],
    job_b: Annotated[str | None, typer.Argument(metavar="B", help="Another job.")] = None,
    ideal: Annotated[
        bool, typer.Option("--ideal", help="Compare A with its circuit's exact distribution.")
    ] = False,
    alpha: AlphaOpt = 0.01,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Are two jobs' counts (or a job and the ideal) consistent? Exit 1 if different."""
    if (job_b is None) == (not ideal):
        raise ConfigError("give two jobs, or one job and --ideal")
    keeper = open_keeper(keep, store, create=False)
    with activity("comparing"):
        judgement = keeper.compare(job_a, job_b, ideal=ideal, alpha=alpha)
    _print_judgement(judgement, json_out)
