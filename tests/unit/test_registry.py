"""The backend registry: backends come from the built-in adapters and the entry-point
group ``jobkeeper.backends`` only, and whatever it resolves must be a backend.

The checks are of our own rules (DESIGN §2 and §4 "Backends"); the exit code of a
configuration error is the README's (2, one line)."""

from __future__ import annotations

from collections.abc import Mapping
from importlib.metadata import EntryPoint
from pathlib import Path
from typing import Any

import pytest

import jobkeeper.backends as registry
from jobkeeper import LocalBackend
from jobkeeper.backends import adapter_names, create_backend, ideal_simulator, resolve_factory
from jobkeeper.cli import main
from jobkeeper.exceptions import ConfigError
from jobkeeper.testing import FlakyBackend, RecordingBackend


def test_builtin_adapters_resolve_lazily_to_their_backends() -> None:
    assert {"statevector", "densitymatrix", "rest"} <= set(adapter_names())
    sv = create_backend("statevector")
    assert sv.info.kind == "simulator" and "sv" in sv.info.version
    dm = create_backend("noisy", {"adapter": "densitymatrix", "readout_error": 0.01})
    assert dm.info.name == "noisy" and "dm" in dm.info.version
    ideal = ideal_simulator()
    assert isinstance(ideal, LocalBackend) and ideal.info.deterministic


def test_the_shipped_test_doubles_come_through_the_entry_point_group(tmp_path: Path) -> None:
    # They are registered in pyproject.toml as a third party would register its own.
    assert {"recording", "flaky"} <= set(adapter_names())
    rec = create_backend("rec", {"adapter": "recording", "ledger_dir": str(tmp_path)})
    assert type(rec) is RecordingBackend
    flaky = create_backend("f", {"adapter": "flaky", "ledger_dir": str(tmp_path)})
    assert type(flaky) is FlakyBackend


@pytest.mark.parametrize(
    "adapter",
    [
        "jobkeeper.testing:recording_backend",  # a module:factory path: no longer accepted
        "jobkeeper.backends.sim.statevector:from_config",
        "os:system",
        "nosuch",
        "",
    ],
)
def test_an_adapter_that_is_neither_built_in_nor_registered_is_a_config_error(
    adapter: str,
) -> None:
    with pytest.raises(ConfigError) as info:
        create_backend("b", {"adapter": adapter})
    message = str(info.value)
    assert f"unknown backend adapter {adapter!r}" in message and "\n" not in message
    assert "statevector" in message  # it lists what is known


def test_an_adapter_that_is_not_a_name_is_a_config_error() -> None:
    with pytest.raises(ConfigError, match="adapter must be a name"):
        create_backend("b", {"adapter": ["statevector"]})


def _register(monkeypatch: pytest.MonkeyPatch, name: str, value: str) -> None:
    entry = EntryPoint(name=name, value=value, group=registry.ENTRY_POINT_GROUP)
    real = registry.entry_points

    def entry_points(*, group: str) -> list[EntryPoint]:
        return [*real(group=group), entry] if group == registry.ENTRY_POINT_GROUP else []

    monkeypatch.setattr(registry, "entry_points", entry_points)


def not_a_backend(name: str, config: Mapping[str, Any]) -> object:
    return {"name": name}


def broken_factory(name: str, config: Mapping[str, Any]) -> object:
    raise KeyError("ledger_dir\nsecond line")


NOT_CALLABLE = 42


@pytest.mark.parametrize(
    ("value", "needle"),
    [
        (f"{__name__}:not_a_backend", "returned a dict, not a backend"),
        (f"{__name__}:broken_factory", "failed to build it: KeyError"),
        (f"{__name__}:NOT_CALLABLE", "is not a backend factory"),
        (f"{__name__}:nosuch", "cannot be loaded: AttributeError"),
        ("jobkeeper_no_such_module:factory", "cannot be loaded: ModuleNotFoundError"),
    ],
)
def test_a_registered_adapter_must_produce_a_backend(
    monkeypatch: pytest.MonkeyPatch, value: str, needle: str
) -> None:
    _register(monkeypatch, "thirdparty", value)
    with pytest.raises(ConfigError) as info:
        create_backend("dev", {"adapter": "thirdparty"})
    assert needle in str(info.value) and "\n" not in str(info.value)


def test_a_registered_adapter_resolves_to_its_factory(monkeypatch: pytest.MonkeyPatch) -> None:
    _register(monkeypatch, "thirdparty", "jobkeeper.testing:recording_backend")
    from jobkeeper.testing import recording_backend

    assert resolve_factory("thirdparty") is recording_backend


def test_the_command_line_refuses_a_module_path_adapter_with_exit_2(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    keep = tmp_path / "keep"
    assert main(["init", "--keep", str(keep)]) == 0
    (keep / "config.toml").write_text(
        '[backends.mine]\nadapter = "jobkeeper.testing:recording_backend"\n'
    )
    capsys.readouterr()
    code = main(["backends", "--keep", str(keep)])
    _, err = capsys.readouterr()
    assert code == 2
    assert "unknown backend adapter" in err and err.count("\n") == 1
    assert "Traceback" not in err
