"""The Python API: :class:`Keeper`, one keep. Everything the command line does goes
through here, so a notebook can do it too::

    from jobkeeper import Keeper
    keeper = Keeper.open(".jobkeeper")
    job = keeper.run("bell.qasm", shots=1000, seed=7)
    job.counts, job.spec.seed

The class is built in layers, one module each: :mod:`~jobkeeper.keeper.core` (the keep's
parts and backends), :mod:`~jobkeeper.keeper.runs` (submitting, running, reading jobs),
:mod:`~jobkeeper.keeper.sweeps` (sweeps of a program's inputs),
:mod:`~jobkeeper.keeper.proof` (keys, trust, verification, bundles, export, reruns,
comparisons); this module opens a keep.
"""

from __future__ import annotations

import os
import uuid
from pathlib import Path

from jobkeeper.config import (
    ARCHIVE_NAME,
    CONFIG_NAME,
    DEFAULT_KEEP,
    KEYS_DIR,
    config_text,
    create_keep_dir,
    load_config,
    write_config,
)
from jobkeeper.exceptions import ConfigError, StoreUnavailable
from jobkeeper.keeper.proof import KeepProof
from jobkeeper.keeper.runs import CircuitInput
from jobkeeper.keeper.sweeps import KeepSweeps, SweepRun
from jobkeeper.provenance.keys import KeyRing
from jobkeeper.store import open_store

__all__ = ["CircuitInput", "Keeper", "SweepRun"]


class Keeper(KeepSweeps, KeepProof):
    """One keep: its store, configuration, signing keys and backends."""

    @classmethod
    def open(
        cls, path: str | os.PathLike[str] | None = None, *, store: str | None = None,
        create: bool = True,
    ) -> Keeper:  # fmt: skip
        """Open the keep at ``path`` (default ``./.jobkeeper``), creating it when asked.
        ``store`` overrides where the archive lives (a ``postgresql://`` URL)."""
        keep = Path(path) if path is not None else DEFAULT_KEEP
        if not keep.exists():
            if not create:
                raise StoreUnavailable(f"no keep at {keep} (run 'jobkeeper init' first)")
            create_keep_dir(keep)
        elif not keep.is_dir():
            raise ConfigError(f"{keep} is not a directory")
        config = load_config(keep)
        if not (keep / CONFIG_NAME).exists() and create:
            write_config(keep / CONFIG_NAME, config_text(store))
            config = load_config(keep)
        location = store or config.store or str(keep / ARCHIVE_NAME)
        if not create and not location.startswith("postgres") and not Path(location).exists():
            raise StoreUnavailable(f"no archive at {location} (run 'jobkeeper init' first)")
        keyring = KeyRing(keep / KEYS_DIR)
        if create and not keyring.exists():
            try:
                keyring.ensure()
            except OSError as exc:
                raise ConfigError(f"cannot write the signing key in {keep}: {exc}") from exc
            # A new keep starts its list of trusted signers (only its own key, for now); a
            # keep made before the list existed starts it at its first verify, which says so.
            from jobkeeper.audit.trust import start_trust_file

            start_trust_file(keep)
        if not location.startswith("postgres") and not Path(location).exists():
            from jobkeeper.audit.witness import refuse_lost_archive

            refuse_lost_archive(keep, location)
        the_store = open_store(location, create=create)
        keeper = cls(path=keep, store=the_store, config=config, keyring=keyring)
        # A read-only keep (a read-only mount, another user's keep) serves every read;
        # what the archive lacks it cannot be given here, and a write says so (StoreFault).
        writable = not getattr(the_store, "read_only", False)
        if keyring.exists() and writable:
            keeper._register_keys()
        if writable and the_store.get_meta("origin") is None:
            the_store.ensure_meta("origin", f"jobkeeper/{uuid.uuid4().hex[:16]}")
        return keeper

    def _register_keys(self) -> None:
        import base64

        for record in self.keyring.public_keys():
            self.store.register_key(record.fingerprint, base64.b64encode(record.raw).decode())
