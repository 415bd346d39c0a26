"""Device profiles and the ``rest`` backend's configuration: what loads, and the messages
for what does not."""

from __future__ import annotations

import copy
import tomllib
from pathlib import Path
from typing import Any

import pytest

from jobkeeper.backends import create_backend
from jobkeeper.backends.rest.adapter import RestBackend
from jobkeeper.backends.rest.config import parse_config
from jobkeeper.backends.rest.profile import (
    DeviceProfile,
    load_profile,
    parse_profile,
    shipped_profiles,
)
from jobkeeper.exceptions import ConfigError

REPO = Path(__file__).resolve().parents[2]
EXAMPLE = REPO / "examples" / "devices" / "tidewater-ion-shelf.toml"
LOOPBACK = REPO / "jobkeeper" / "profiles" / "loopback.toml"


def loopback_data() -> dict[str, Any]:
    return tomllib.loads(LOOPBACK.read_text(encoding="utf-8"))


def test_shipped_loopback_profile_loads() -> None:
    assert "loopback" in shipped_profiles()
    profile = load_profile()  # the default
    assert profile.device.name == "loopback"
    assert profile.device.deterministic is False
    assert profile.auth.header == "Authorization" and profile.auth.scheme == "Bearer"
    assert profile.idempotency.header == "Idempotency-Key"
    assert profile.retry_hint.header == "Retry-After"
    assert profile.requests.calibration is not None
    assert set(profile.states.values()) == {"waiting", "done", "failed", "cancelled"}


def test_invented_example_profile_loads_and_says_it_is_invented() -> None:
    profile = load_profile(str(EXAMPLE))
    assert profile.device.name == "tidewater-ion-shelf"
    assert "invented" in profile.device.description.lower()
    assert EXAMPLE.read_text(encoding="utf-8").startswith("# INVENTED DEVICE")
    assert profile.requests.result is None  # counts come with the status
    assert profile.auth.scheme == ""


def test_profile_digest_ignores_comments_and_layout(tmp_path: Path) -> None:
    text = LOOPBACK.read_text(encoding="utf-8")
    copy_path = tmp_path / "same.toml"
    copy_path.write_text("# another comment\n\n" + text, encoding="utf-8")
    assert load_profile(str(copy_path)).digest() == load_profile().digest()


def _problems(data: dict[str, Any]) -> str:
    with pytest.raises(ConfigError) as caught:
        parse_profile(data, source="test.toml")
    return str(caught.value)


@pytest.mark.parametrize(
    ("edit", "expected"),
    [
        (
            lambda d: d["requests"]["submit"].pop("handle"),
            "requests.submit: handle: give the JSON Pointer to the job id",
        ),
        (
            lambda d: d["requests"]["submit"].update(handle="job/id"),
            "requests.submit.handle: JSON Pointer 'job/id' must be empty or start with '/'",
        ),
        (
            lambda d: d["requests"]["status"].update(state="/job/st~2ate"),
            "'~' must be followed by 0 or 1",
        ),
        (
            lambda d: d["requests"]["submit"]["body"].update(extra="{shot}"),
            "unknown placeholder {shot} in body; a body may hold {circuit}",
        ),
        (
            lambda d: d["requests"]["submit"]["body"].pop("program"),
            "the submit body must send the circuit: put {circuit} in it",
        ),
        (
            lambda d: d["requests"]["status"].update(path="/v1/jobs"),
            "must hold {handle}, the device's job id",
        ),
        (
            lambda d: d["requests"]["status"].update(path="/v1/jobs/{job}"),
            "unknown placeholder {job} in path '/v1/jobs/{job}'",
        ),
        (lambda d: d["requests"]["status"].update(method="FETCH"), "requests.status.method"),
        (lambda d: d["states"].update(queued="pending"), "states.queued: Input should be"),
        (
            lambda d: d.update(states={"queued": "waiting"}),
            "states must map at least one of the device's words to 'done'",
        ),
        (lambda d: d["auth"].update(sheme="Bearer"), "auth.sheme: Extra inputs are not permitted"),
        (lambda d: d.update(format=3), "format: Input should be 1 or 2"),
        (lambda d: d.pop("results"), "results: Field required"),
        (
            lambda d: d["requests"]["submit"]["body"].update(o="x{options}"),
            "{options} is an object: it must be a whole value",
        ),
        (lambda d: d["device"].update(max_qubits=0), "device.max_qubits"),
    ],
)
def test_profile_validation_messages(edit: Any, expected: str) -> None:
    data = copy.deepcopy(loopback_data())
    edit(data)
    message = _problems(data)
    assert message.startswith("device profile test.toml is invalid:")
    assert expected in message


def test_profile_validation_lists_every_problem() -> None:
    data = copy.deepcopy(loopback_data())
    data["requests"]["submit"]["handle"] = "nope"
    data["states"]["queued"] = "later"
    message = _problems(data)
    assert "requests.submit.handle" in message and "states.queued" in message


def test_profile_file_errors(tmp_path: Path) -> None:
    with pytest.raises(
        ConfigError, match=r"no shipped device profile 'nosuch'; shipped: .*loopback"
    ):
        load_profile("nosuch")
    with pytest.raises(ConfigError, match="cannot read device profile"):
        load_profile(str(tmp_path / "absent.toml"))
    broken = tmp_path / "broken.toml"
    broken.write_text("[device\nname = 1\n", encoding="utf-8")
    with pytest.raises(ConfigError, match="is not valid TOML"):
        load_profile(str(broken))


def test_profile_model_is_frozen() -> None:
    profile = load_profile()
    assert isinstance(profile, DeviceProfile)
    with pytest.raises(ValueError):
        profile.device.name = "other"  # type: ignore[misc]


# --------------------------------------------------------------------------- configuration

BASE = {"adapter": "rest", "url": "http://127.0.0.1:8765", "token_env": "LB_TOKEN"}


def test_registry_builds_a_rest_backend() -> None:
    backend = create_backend("rehearsal", {**BASE, "pricing": {"per_shot": 0.01}})
    assert isinstance(backend, RestBackend)
    info = backend.info
    assert info.kind == "remote" and info.name == "rehearsal"
    assert info.deterministic is False
    assert info.pricing is not None and info.pricing.cost(100) == pytest.approx(1.0)
    assert info.config_hash.startswith("sha256:")
    assert info.calibration is None  # nothing fetched yet: info never does I/O


def test_config_hash_changes_with_the_config() -> None:
    one = create_backend("a", BASE).info.config_hash
    two = create_backend("a", {**BASE, "url": "http://127.0.0.1:8766"}).info.config_hash
    assert one != two


@pytest.mark.parametrize("key", ["token", "api_key", "password", "device_secret"])
def test_config_refuses_secrets(key: str) -> None:
    secret = "tok-1234567890"
    with pytest.raises(ConfigError) as caught:
        parse_config("dev", {**BASE, key: secret})
    assert "token_env" in str(caught.value)
    assert secret not in str(caught.value)


@pytest.mark.parametrize(
    ("change", "expected"),
    [
        ({"url": "http://device.example:80"}, "url: must be https://"),
        ({"url": "ftp://127.0.0.1"}, "url: must be https://"),
        ({"token_env": "MY TOKEN"}, "token_env: must be the NAME of an environment variable"),
        ({"timeout": -1}, "timeout"),
        ({"max_connections": 0}, "max_connections"),
        ({"colour": "blue"}, "colour: Extra inputs are not permitted"),
        ({"adapter": "other"}, "adapter"),
    ],
)
def test_config_messages(change: dict[str, Any], expected: str) -> None:
    with pytest.raises(ConfigError) as caught:
        parse_config("dev", {**BASE, **change})
    message = str(caught.value)
    assert message.startswith("backend 'dev' (adapter rest) is misconfigured:\n")
    assert expected in message


def test_config_accepts_https_and_loopback_http() -> None:
    for url in ("https://device.example", "http://localhost:9", "http://[::1]:9"):
        parse_config("dev", {**BASE, "url": url})
    timeouts = parse_config("dev", {**BASE, "timeout": 60}).timeouts()
    assert (timeouts.connect, timeouts.read, timeouts.pool) == (10.0, 60.0, 60.0)
    table = parse_config("dev", {**BASE, "timeout": {"read": 2}}).timeouts()
    assert table.read == 2 and table.connect == 5


def test_repr_names_the_variable_not_the_token(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("LB_TOKEN", "tok-very-secret")
    backend = create_backend("rehearsal", BASE)
    assert "LB_TOKEN" in repr(backend)
    assert "tok-very-secret" not in repr(backend) + repr(backend.info)
