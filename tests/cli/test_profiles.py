"""Device profiles: every profile in the repository loads, and a bad one is refused when
it is loaded, with exit 2 and one line naming its file, the key and the reason."""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest

from jobkeeper.backends.rest.profile import load_profile, shipped_profiles
from jobkeeper.cli import main

REPO = Path(__file__).resolve().parents[2]
EXAMPLE = REPO / "examples" / "devices" / "saltmarsh-neutral-grid.toml"


def repository_profiles() -> list[Path]:
    found = [
        path for path in REPO.rglob("*.toml")
        if ".venv" not in path.parts and "[device]" in path.read_text(encoding="utf-8")
    ]  # fmt: skip
    return sorted(found)


def test_the_repository_holds_the_shipped_and_example_profiles() -> None:
    names = {path.name for path in repository_profiles()}
    assert {"loopback.toml", "loopback-exchange.toml", "tidewater-ion-shelf.toml",
            "saltmarsh-neutral-grid.toml"} <= names  # fmt: skip
    assert {"loopback", "loopback-exchange", "loopback-ledger", "loopback-relay"} <= set(
        shipped_profiles()
    )


@pytest.mark.parametrize("path", repository_profiles(), ids=lambda p: p.name)
def test_every_profile_in_the_repository_loads(path: Path) -> None:
    profile = load_profile(str(path))
    assert profile.format in (1, 2) and profile.device.name


def _edit(text: str, old: str, new: str) -> str:
    assert old in text
    return text.replace(old, new, 1)


BASE = EXAMPLE.read_text(encoding="utf-8")
BAD = {
    "unknown key": (
        _edit(BASE, 'bit_order = "c0_left"', 'bit_order = "c0_left"\nbit_orde = "x"'),
        "results.bit_orde",
        "Extra inputs are not permitted",
    ),
    # RFC 6901 §3: a pointer is empty or starts with "/", and "~" is followed by 0 or 1
    "pointer without a slash": (
        _edit(BASE, 'state = "/batch/phase"', 'state = "batch/phase"'),
        "requests.status.state",
        "must be empty or start with '/'",
    ),
    "pointer with a bare tilde": (
        _edit(BASE, 'message = "/batch/why"', 'message = "/batch/wh~y"'),
        "requests.status.message",
        "'~' must be followed by 0 or 1",
    ),
    "missing required request": (
        _edit(BASE, "[requests.status]", "[requests.poll]"),
        "requests.status",
        "Field required",
    ),
    "undecodable encoding": (
        _edit(BASE, 'encoding = "bit_arrays"', 'encoding = "base3"'),
        "results.encoding",
        "Input should be",
    ),
    "arrays cannot key counts": (
        _edit(BASE, 'samples = "/readout/shots"', 'counts = "/readout/shots"'),
        "results",
        "'bit_arrays' cannot key counts",
    ),
    "format 2 key in a format 1 profile": (
        _edit(BASE, "format = 2", "format = 1"),
        "(top level)",
        "format 2 keys; set format = 2",
    ),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_a_bad_profile_is_refused_at_load_naming_file_key_and_reason(
    case: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    text, key, reason = BAD[case]
    tomllib.loads(text)  # still valid TOML: the profile language refuses it
    profile = tmp_path / "bad-device.toml"
    profile.write_text(text, encoding="utf-8")
    keep = tmp_path / "keep"
    assert main(["init", "--keep", str(keep)]) == 0
    (keep / "config.toml").write_text(
        f'[backends.grid]\nadapter = "rest"\nprofile = "{profile}"\n'
        'url = "https://grid.invalid"\nclient_id_env = "A"\nclient_secret_env = "B"\n'
    )
    capsys.readouterr()
    assert main(["probe", "grid", "--keep", str(keep)]) == 2
    out, err = capsys.readouterr()
    lines = err.strip().splitlines()
    assert out == "" and len(lines) == 1, err
    assert str(profile) in lines[0] and key in lines[0] and reason in lines[0], lines[0]


def _keys(model: type, prefix: str = "") -> list[str]:
    """Every key of the profile language, as dotted paths (nested tables walked)."""
    from pydantic import BaseModel

    found = []
    for name, field in model.model_fields.items():  # type: ignore[attr-defined]
        found.append(prefix + name)
        for kind in getattr(field.annotation, "__args__", (field.annotation,)):
            if isinstance(kind, type) and issubclass(kind, BaseModel):
                found += _keys(kind, f"{prefix}{name}.")
    return found


def test_the_readme_profile_reference_documents_every_key() -> None:
    from jobkeeper.backends.rest.profile import DeviceProfile

    readme = (REPO / "README.md").read_text(encoding="utf-8")
    reference = readme.split("### Profile reference", 1)[1].split("\n### ", 1)[0]
    example = reference.split("```toml", 1)[1].split("```", 1)[0]
    tables = {"device", "auth", "auth.token_request", "idempotency", "retry_hint", "errors",
              "requests", "results", "results.pages", "states"}  # fmt: skip
    for key in _keys(DeviceProfile):
        name = key.rpartition(".")[2]
        if key in tables or (key.startswith("requests.") and key.count(".") == 1):
            assert f"[{key}]" in example or key == "requests", key
        elif key != "states":
            assert f"\n{name} = " in example or f"# {name} = " in example, key
