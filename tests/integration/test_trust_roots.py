"""Trust is rooted outside the archive: ``verify`` accepts a signer only if the verifying
keep trusts it (its own keys, or keys its owner trusted), never because the archive lists
it. The principle is that of every signing system with a verifier-held keyring (DSSE v1
leaves key trust to the verifier; in-toto's layout keys, OpenPGP's keyring); the
scenarios are invented. An attacker here is a second keep writing to the same archive
file, so its key is listed and its entries are appended through the store's own path.
"""

from __future__ import annotations

import base64
import hashlib
import json
from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.audit.trust import TRUST_FILE
from jobkeeper.cli import main
from jobkeeper.exceptions import ConfigError, VerificationError
from tests.integration.helpers import circuit_text


def jk(capsys: pytest.CaptureFixture[str], *args: str) -> tuple[int, str, str]:
    capsys.readouterr()
    code = main(list(args))
    out, err = capsys.readouterr()
    return code, out, err


def _fp(keep: Path) -> str:
    return (keep / "keys" / "active").read_text().strip()


@pytest.fixture
def owner(tmp_path: Path) -> Path:
    keep = tmp_path / "owner"
    with Keeper.open(keep) as keeper:
        keeper.run_many([circuit_text(0.1), circuit_text(0.2)], shots=32, seed=1, labels={"own"})
    return keep


def _attack(owner: Path, tmp_path: Path, label: str = "forged") -> Path:
    """An attacker with write access: a keep of its own on the owner's archive file."""
    evil = tmp_path / "evil"
    with Keeper.open(evil, store=str(owner / "archive.db")) as keeper:
        keeper.run(circuit_text(0.7), shots=32, seed=5, labels={label})
    return evil


def test_an_entry_signed_by_a_listed_but_untrusted_key_fails_until_trusted(
    owner: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    evil = _attack(owner, tmp_path)
    attacker = _fp(evil)
    with Keeper.open(owner, create=False) as keeper:
        assert attacker in keeper.store.public_keys()  # the archive lists it...
    code, out, _ = jk(capsys, "verify", "--all", "--keep", str(owner))
    assert code == 1  # ...but the owner never trusted it
    assert f"signed by key {attacker}" in out
    assert f"jobkeeper trust add {attacker} --name NAME" in out
    # The separate message: every signature and the log hold, only the signer is unknown.
    assert "but a signer is not trusted" in out and "PROBLEM" not in out
    code, out, _ = jk(capsys, "verify", "--all", "--keep", str(owner), "--json")
    report = json.loads(out)
    assert code == 1 and report["signer_trusted"] is False
    assert report["untrusted_signers"] == [attacker]
    code, out, err = jk(capsys, "verify", "--all", "--keep", str(owner), "--integrity-only")
    assert code == 0 and "integrity only" in out and "not whether" in err
    # A prefix is never accepted, only the full fingerprint.
    code, _, err = jk(capsys, "trust", "add", attacker[:16], "--name", "x", "--keep", str(owner))
    assert code == 2 and "prefixes are not accepted" in err
    code, out, _ = jk(capsys, "trust", "add", attacker, "--name", "lab B", "--keep", str(owner))
    assert code == 0 and attacker in out
    code, out, _ = jk(capsys, "verify", "--all", "--keep", str(owner))
    assert code == 0 and "everything holds" in out
    code, out, _ = jk(capsys, "trust", "remove", attacker, "--keep", str(owner))
    assert code == 0
    assert jk(capsys, "verify", "--all", "--keep", str(owner))[0] == 1


def test_the_trusted_list_lives_outside_the_archive_and_pins_the_key(
    owner: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    evil = _attack(owner, tmp_path)
    attacker = _fp(evil)
    assert jk(capsys, "trust", "add", attacker, "--name", "b", "--keep", str(owner))[0] == 0
    data = json.loads((owner / TRUST_FILE).read_text())
    (entry,) = data["keys"]
    raw = base64.b64decode(entry["public_key"])
    # The fingerprint is the SHA-256 of the raw 32-byte Ed25519 key (RFC 8032 §5.1.5).
    assert len(raw) == 32 and hashlib.sha256(raw).hexdigest() == attacker == entry["fingerprint"]
    assert data["format"] == "jobkeeper-trusted-keys/v2" and entry["name"] == "b"
    code, out, _ = jk(capsys, "trust", "list", "--keep", str(owner), "--json")
    assert code == 0
    listed = json.loads(out)
    assert [k["fingerprint"] for k in listed["keys"]] == [_fp(owner), attacker]
    # Wiping the archive's key table changes nothing: verify uses the keep's own copy.
    import sqlite3

    conn = sqlite3.connect(owner / "archive.db")
    with conn:
        conn.execute("DELETE FROM public_keys")
    conn.close()
    with Keeper.open(owner, create=False) as keeper:  # re-lists only the owner's own key
        assert keeper.verify().ok


def test_trust_add_takes_the_key_from_a_file_and_checks_it(
    owner: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    other = tmp_path / "other"
    assert jk(capsys, "init", "--keep", str(other))[0] == 0
    export = tmp_path / "other.json"
    assert jk(capsys, "keys", "--keep", str(other), "--export", str(export))[0] == 0
    fp = _fp(other)
    with Keeper.open(owner, create=False) as keeper:
        with pytest.raises(ConfigError, match="lists no key"):
            keeper.trust.add(fp, "other")  # not in this archive, no file given
        with pytest.raises(VerificationError, match="not trusted"):
            keeper.trust.add("0" * 64, "liar", key_file=export)  # key of another fingerprint
        entry, new = keeper.trust.add(fp, "other", key_file=export)
        assert new and entry.fingerprint == fp
        assert keeper.trust.add(fp, "again", key_file=export)[1] is False
    # The same key as a PEM public key (SubjectPublicKeyInfo, RFC 8410).
    from cryptography.hazmat.primitives import serialization

    from jobkeeper.provenance.keys import load_signing_key

    key = load_signing_key(other / "keys" / f"{fp}.key")
    pem = tmp_path / "other.pem"
    pem.write_bytes(key.public_key().public_bytes(
        serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo))  # fmt: skip
    assert jk(capsys, "trust", "remove", fp, "--keep", str(owner))[0] == 0
    code, _, _ = jk(capsys, "trust", "add", fp, "--name", "o", "--key", str(pem),
                    "--keep", str(owner))  # fmt: skip
    assert code == 0
    code, _, err = jk(capsys, "trust", "remove", _fp(owner), "--keep", str(owner))
    assert code == 2 and "own key" in err


def test_a_keep_made_before_trust_roots_trusts_its_own_key_and_says_what_it_does_not(
    owner: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    (owner / TRUST_FILE).unlink()  # as a keep made before the list existed
    assert jk(capsys, "verify", "--all", "--keep", str(owner))[0] == 0  # old archive: fine
    evil = _attack(owner, tmp_path)
    (owner / TRUST_FILE).unlink()
    code, _, err = jk(capsys, "verify", "--all", "--keep", str(owner))
    assert code == 1
    assert "had no list of trusted keys" in err and _fp(evil) in err
    assert (owner / TRUST_FILE).exists()
    code, _, err = jk(capsys, "verify", "--all", "--keep", str(owner))
    assert "had no list" not in err  # said once, at the first verify


def test_a_bundle_signed_by_an_untrusted_key_fails_until_trusted(
    owner: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str],
    monkeypatch: pytest.MonkeyPatch,
) -> None:  # fmt: skip
    evil = _attack(owner, tmp_path)
    attacker = _fp(evil)
    bundle = tmp_path / "b.json"
    assert main(["bundle", "--label", "forged", "--keep", str(evil), "-o", str(bundle)]) == 0
    code, out, _ = jk(capsys, "verify", str(bundle), "--keep", str(owner), "--json")
    report = json.loads(out)
    assert code == 1 and report["signer_trusted"] is False
    assert attacker in report["untrusted_signers"]
    code, out, _ = jk(capsys, "verify", str(bundle), "--keep", str(owner))
    assert code == 1 and "but a signer is not trusted" in out and attacker in out
    assert jk(capsys, "trust", "add", attacker, "--name", "b", "--keep", str(owner))[0] == 0
    code, out, _ = jk(capsys, "verify", str(bundle), "--keep", str(owner))
    assert code == 0, out
    # With no keep at hand (an empty working directory) a bundle needs --key.
    nowhere = tmp_path / "nowhere"
    nowhere.mkdir()
    monkeypatch.chdir(nowhere)
    monkeypatch.delenv("JOBKEEPER_KEEP", raising=False)
    code, out, err = jk(capsys, "verify", str(bundle), "--json")
    assert code == 1 and json.loads(out)["signer_trusted"] is False
    assert "no keep at hand and no --key" in err
    code, out, _ = jk(capsys, "verify", str(bundle), "--key", attacker, "--json")
    assert code == 0 and json.loads(out)["signer_trusted"] is True
    code, out, _ = jk(capsys, "verify", str(bundle), "--key", _fp(owner), "--json")
    assert code == 1 and json.loads(out)["untrusted_signers"] == [attacker]
    code, out, _ = jk(capsys, "verify", str(bundle), "--integrity-only", "--json")
    assert code == 0 and json.loads(out)["signer_trusted"] is None


def test_rotation_keeps_old_entries_and_refuses_the_retired_key_after_its_index(
    owner: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    old = _fp(owner)
    code, out, _ = jk(capsys, "keys", "--rotate", "--keep", str(owner), "--json")
    rotated = json.loads(out)
    assert code == 0 and rotated["retired"] == old and rotated["retired_from"] == 2
    new = rotated["fingerprint"]
    with Keeper.open(owner, create=False) as keeper:
        keeper.run(circuit_text(0.3), shots=32, seed=2)
        report = keeper.verify()
        assert report.ok, report.problems  # two entries by the old key, one by the new
        assert {e.signer for e in keeper.store.log_entries()} == {old, new}
    # A worker still holding the old key signs after the rotation: the store accepts the
    # append (it is correctly formed), verify must not.
    (owner / "keys" / "active").write_text(old + "\n")
    with Keeper.open(owner, create=False) as keeper:
        keeper.run(circuit_text(0.4), shots=32, seed=2)
    (owner / "keys" / "active").write_text(new + "\n")
    code, out, _ = jk(capsys, "verify", "--all", "--keep", str(owner))
    assert code == 1
    assert f"log index 3: signed by retired key {old} after its retirement" in out
    # Its checkpoint too (size 4 covers the new key's entry 2): flagged, unlike the old
    # key's checkpoint of size 2, signed before the rotation.
    assert f"checkpoint 2: size 4, signed by retired key {old} after its retirement" in out
    assert "checkpoint 1:" not in out and "checkpoint 0:" not in out
    code, out, _ = jk(capsys, "trust", "list", "--keep", str(owner))
    assert f"{old}  this keep  [own, retired from log index 2" in out


def test_a_shared_list_is_imported_with_its_retirements(
    owner: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    worker = tmp_path / "worker"
    shared = tmp_path / "team-keys.json"
    Keeper.open(worker).close()
    first = _fp(worker)

    def share_and_import() -> str:
        code, out, _ = jk(capsys, "trust", "list", "--keep", str(worker), "--json")
        assert code == 0
        shared.write_text(out)  # as committed to the team's repository
        code, out, _ = jk(capsys, "trust", "import", str(shared), "--keep", str(owner))
        assert code == 0
        return out

    assert "trusted 1 new key(s); adopted 0 retirement(s)" in share_and_import()
    with Keeper.open(worker, create=False) as keeper:
        assert keeper.trust.rotate() == (first, _fp(worker), 0)
    assert "trusted 1 new key(s); adopted 1 retirement(s)" in share_and_import()
    with Keeper.open(owner, create=False) as keeper:
        trust = keeper.trust.load()
        assert first in trust.keys and _fp(worker) in trust.keys
        assert trust.retired_from == {first: 0}
        assert trust.names[first] == "team-keys"  # not "this keep": it is the worker's key
    # A team's file written in the first format (lowerCamelCase names) still imports.
    current = json.loads(shared.read_text())
    old = {"format": "jobkeeper-trusted-keys/v1",
           "keys": [{"fingerprint": k["fingerprint"], "publicKey": k["public_key"],
                     "name": k["name"], "addedAt": k["added_at"], "retired": k["retired"],
                     "retiredFrom": k["retired_from"], "successor": k["successor"]}
                    for k in current["keys"]]}  # fmt: skip
    shared.write_text(json.dumps(old))
    Keeper.open(tmp_path / "third").close()
    code, _, err = jk(capsys, "trust", "import", str(shared), "--keep", str(tmp_path / "third"))
    assert code == 0, err
    with Keeper.open(tmp_path / "third", create=False) as keeper:
        assert keeper.trust.load().retired_from == {first: 0}
    bad = current
    bad["keys"][0]["public_key"] = bad["keys"][1]["public_key"]
    shared.write_text(json.dumps(bad))
    code, _, err = jk(capsys, "trust", "import", str(shared), "--keep", str(owner))
    assert code == 1 and "is not the key its entry holds" in err
