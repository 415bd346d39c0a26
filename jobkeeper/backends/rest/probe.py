"""Probing a REST device without submitting work: is it reachable, does it take the
credentials (the token request included), can its calibration be read; and a summary of
what the profile declares."""

from __future__ import annotations

from collections.abc import Awaitable, Callable, Mapping
from typing import Any

import httpx

from jobkeeper.backends.rest.credentials import ClientCredentials, Credentials
from jobkeeper.backends.rest.profile import DeviceProfile
from jobkeeper.backends.rest.session import DeviceSession
from jobkeeper.exceptions import BackendError, ConfigError
from jobkeeper.probing import ProbeCheck, ProbeReport


async def _reachable(session: DeviceSession) -> ProbeCheck:
    # Any HTTP answer at the device's URL, even 404, shows it is there.
    try:
        async with session.client().stream("GET", "") as response:
            status = response.status_code
    except httpx.HTTPError as exc:
        detail = session.redactor.text(str(exc) or type(exc).__name__)
        return ProbeCheck("reachable", "failed", f"{session.url}: {detail}")
    return ProbeCheck("reachable", "ok", f"{session.url} answered HTTP {status}")


async def _authentication(credentials: Credentials) -> ProbeCheck:
    try:
        credentials.check()
        if isinstance(credentials, ClientCredentials):
            await credentials.token()
            return ProbeCheck("authentication", "ok", "the token request gave an access token")
    except (BackendError, ConfigError) as exc:
        return ProbeCheck("authentication", "failed", str(exc))
    return ProbeCheck(
        "authentication", "ok", "the token is set (the device checks it on the calibration read)"
    )


async def probe_device(
    name: str,
    profile: DeviceProfile,
    session: DeviceSession,
    credentials: Credentials,
    calibrate: Callable[[], Awaitable[Mapping[str, Any] | None]],
) -> ProbeReport:
    """Reachability, authentication and a calibration read, each only when the previous
    one passed; nothing is submitted."""
    checks = [await _reachable(session)]
    if checks[0].outcome == "ok":
        checks.append(await _authentication(credentials))
    else:
        checks.append(ProbeCheck("authentication", "skipped", "the device is not reachable"))
    if profile.requests.calibration is None:
        checks.append(ProbeCheck("calibration", "skipped", "the profile has no calibration read"))
    elif checks[-1].outcome != "ok":
        checks.append(ProbeCheck("calibration", "skipped", "not authenticated"))
    else:
        try:
            snapshot = await calibrate()
            data = (snapshot or {}).get("data")
            size = f"{len(data)} fields" if isinstance(data, Mapping) else type(data).__name__
            checks.append(ProbeCheck("calibration", "ok", f"read a snapshot ({size})"))
        except BackendError as exc:
            checks.append(ProbeCheck("calibration", "failed", str(exc)))
    return ProbeReport(
        backend=name, kind="remote", checks=tuple(checks), declared=declared(profile)
    )


def declared(profile: DeviceProfile) -> dict[str, Any]:
    """What the profile says the device does, in a few plain fields."""
    requests, results = profile.requests, profile.results
    submit = requests.submit
    handle = (
        f"JSON Pointer {submit.handle}"
        if submit.handle_from == "answer"
        else f"Location header ({submit.handle_part.replace('_', ' ')})"
    )
    if results.pages is None:
        pages = "one answer"
    elif results.pages.link:
        pages = "RFC 8288 Link rel=next"
    elif results.pages.next is not None:
        pages = f"next URL at {results.pages.next}"
    else:
        pages = f"numbered pages (?{results.pages.number_parameter}=)"
    return {
        "format": profile.format,
        "device": profile.device.name,
        "max_qubits": profile.device.max_qubits,
        "max_shots": profile.device.max_shots,
        "authentication": (
            "OAuth 2.0 client credentials"
            if profile.auth.kind == "client_credentials"
            else f"token in the {profile.auth.header} header"
        ),
        "submit": f"{submit.method} {submit.path} ({submit.body_format} body, {submit.program})",
        "handle": handle,
        "repeated_key": submit.repeats,
        "status": f"{requests.status.method} {requests.status.path} at {requests.status.state}",
        "outcome": (
            f"samples at {results.samples}"
            if results.samples is not None
            else f"counts at {results.counts}"
        ),
        "encoding": f"{results.encoding}, bit order {results.bit_order}",
        "pages": pages,
        "states": dict(profile.states),
        "cancel": requests.cancel is not None,
        "calibration": requests.calibration is not None,
        "profile_digest": profile.digest(),
    }


def _auth(profile: DeviceProfile) -> str:
    if profile.auth.kind == "client_credentials":
        return "OAuth 2.0 client credentials"
    return f"token in the {profile.auth.header} header"
