"""``jobkeeper trust``: the signers whose entries ``verify`` accepts (add, list, remove,
import). The list lives in the keep's ``trusted-keys.json``, outside the archive."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from jobkeeper.cli._app import JsonOpt, KeepOpt, StoreOpt, app, echo_json, open_keeper

trust_app = typer.Typer(
    help="Manage the signing keys this keep trusts (its own key is always trusted).",
    no_args_is_help=True,
)
app.add_typer(trust_app, name="trust")

FingerprintArg = Annotated[
    str, typer.Argument(metavar="FINGERPRINT", help="The key's full fingerprint (64 hex).")
]
KEY_HELP = (
    "Public key file (PEM, or `keys --export` JSON) [default: the archive's listed key, "
    "checked against FINGERPRINT]."
)


@trust_app.command("add")
def add(
    fingerprint: FingerprintArg,
    name: Annotated[str, typer.Option("--name", help="Who holds the key (a worker, a person).")],
    key: Annotated[Path | None, typer.Option("--key", help=KEY_HELP)] = None,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Trust the key with this full fingerprint (never a prefix)."""
    keeper = open_keeper(keep, store, create=False)
    entry, new = keeper.trust.add(fingerprint, name, key_file=key)
    if json_out:
        echo_json({**entry.to_dict(), "added": new})
    elif new:
        typer.echo(f"trusted {entry.fingerprint} ({entry.name})")
    else:
        typer.echo(f"{entry.fingerprint} is already trusted ({entry.name})")


@trust_app.command("list")
def list_keys(keep: KeepOpt = None, store: StoreOpt = None, json_out: JsonOpt = False) -> None:
    """Every trusted key, full fingerprints; --json prints a trusted-keys file."""
    from jobkeeper.provenance.trusted import trusted_document

    keeper = open_keeper(keep, store, create=False)
    rows = keeper.trust.list()
    if json_out:
        # The same format as trusted-keys.json, so it can be committed and imported.
        echo_json(trusted_document(entry for entry, _ in rows))
        return
    for entry, source in rows:
        state = f"retired from log index {entry.retired_from}" if entry.retired else "signing"
        typer.echo(f"{entry.fingerprint}  {entry.name}  [{source}, {state}, since "
                   f"{entry.added_at}]")  # fmt: skip


@trust_app.command("remove")
def remove(
    fingerprint: FingerprintArg,
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Stop trusting a key: entries it signed no longer verify here."""
    keeper = open_keeper(keep, store, create=False)
    entry = keeper.trust.remove(fingerprint)
    if json_out:
        echo_json({**entry.to_dict(), "removed": True})
    else:
        typer.echo(f"no longer trusted: {entry.fingerprint} ({entry.name})")


@trust_app.command("import")
def import_keys(
    source: Annotated[Path, typer.Argument(metavar="FILE", help="A trusted-keys file.")],
    keep: KeepOpt = None,
    store: StoreOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """Trust the keys of a shared trusted-keys file (e.g. a team's, from its repository)."""
    keeper = open_keeper(keep, store, create=False)
    added, retired = keeper.trust.import_file(source)
    if json_out:
        echo_json({"added": added, "retired": retired})
    else:
        typer.echo(f"trusted {added} new key(s); adopted {retired} retirement(s) from {source}")
