"""What authenticates a REST backend's requests: a static token from an environment
variable, or an access token obtained with OAuth 2.0 client credentials (RFC 6749 §4.4).

Client credentials: the token request is form-encoded (``grant_type=client_credentials``
and, if the profile names one, ``scope``), the client authenticates with HTTP Basic
(RFC 6749 §2.3.1: id and secret each form-urlencoded, then joined by ``:``) or with
``client_id``/``client_secret`` form fields. The access token is kept in memory until a
little before its ``expires_in`` (RFC 6749 §5.1) and fetched afresh once when the device
answers 401. The client id and secret are read from the environment variables the
backend's configuration names, at each token request. Every secret, the access tokens
included, is handed to the backend's :class:`~jobkeeper.backends.rest.redaction.Redactor`
the moment it is read, so nothing a device says can carry it into the keep.
"""

from __future__ import annotations

import asyncio
import base64
import time
from collections.abc import Callable, Mapping
from urllib.parse import quote_plus

from jobkeeper.backends.rest.http import DeviceAuthError
from jobkeeper.backends.rest.profile import AuthSpec, DeviceProfile, TokenRequestSpec
from jobkeeper.backends.rest.redaction import Redactor
from jobkeeper.backends.rest.session import DeviceSession, Outgoing
from jobkeeper.exceptions import ConfigError

#: tokens are renewed this share of their lifetime before they expire (at most 30 s).
RENEW_EARLY = 0.1
#: a token answer without ``expires_in`` is used until the device refuses it, or this long.
DEFAULT_LIFETIME = 3600.0


def read_variable(environ: Mapping[str, str], name: str, backend: str, what: str) -> str:
    value = environ.get(name, "").strip()
    if not value:
        raise DeviceAuthError(
            f"{backend}: environment variable {name} is not set or empty; it must hold {what}"
        )
    return value


class StaticToken:
    """The token in one environment variable, sent on every request."""

    def __init__(
        self,
        *,
        backend: str,
        auth: AuthSpec,
        token_env: str,
        environ: Mapping[str, str],
        redactor: Redactor,
    ) -> None:
        self._backend, self._auth, self._env = backend, auth, token_env
        self._environ, self._redactor = environ, redactor

    def describe(self) -> str:
        return f"the token in environment variable {self._env} is missing or wrong"

    def names(self) -> str:
        """The variable's name (never its value)."""
        return self._env

    def check(self) -> None:
        self._token()

    def _token(self) -> str:
        token = read_variable(self._environ, self._env, self._backend, "the device's token")
        self._redactor.add(token)
        return token

    async def headers(self) -> dict[str, str]:
        return _header(self._auth, self._token())

    async def renew(self, used: Mapping[str, str]) -> bool:
        """A static token cannot be renewed: the refusal stands."""
        return False


class ClientCredentials:
    """An access token from the device's token endpoint, cached until it expires."""

    def __init__(
        self,
        *,
        backend: str,
        auth: AuthSpec,
        request: TokenRequestSpec,
        id_env: str,
        secret_env: str,
        environ: Mapping[str, str],
        session: DeviceSession,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self._backend, self._auth, self._request = backend, auth, request
        self._id_env, self._secret_env = id_env, secret_env
        self._environ, self._session, self._clock = environ, session, clock
        self._token: str | None = None
        self._renew_at = 0.0
        self._lock = asyncio.Lock()
        self.token_requests = 0

    def describe(self) -> str:
        return (
            f"the client id or secret in environment variables {self._id_env} and "
            f"{self._secret_env} is missing or wrong, or the access token was refused"
        )

    def names(self) -> str:
        """The variables' names (never their values)."""
        return f"{self._id_env}, {self._secret_env}"

    def check(self) -> None:
        self._client()

    def _client(self) -> tuple[str, str]:
        client_id = read_variable(self._environ, self._id_env, self._backend, "the client id")
        secret = read_variable(self._environ, self._secret_env, self._backend, "the client secret")
        self._session.redactor.add(secret)
        return client_id, secret

    async def headers(self) -> dict[str, str]:
        return _header(self._auth, await self.token())

    async def token(self) -> str:
        """The cached access token, or a new one when none is cached or it is about to
        expire."""
        async with self._lock:
            if self._token is None or self._clock() >= self._renew_at:
                await self._fetch()
            assert self._token is not None
            return self._token

    async def renew(self, used: Mapping[str, str]) -> bool:
        """Forget the token that was refused (unless another request renewed it already)
        so that the next request fetches a new one."""
        async with self._lock:
            if self._token is not None and used == _header(self._auth, self._token):
                self._token = None
        return True

    async def _fetch(self) -> None:
        client_id, secret = self._client()
        form = {"grant_type": "client_credentials"}
        if self._request.scope:
            form["scope"] = self._request.scope
        headers: dict[str, str] = {}
        if self._request.client_auth == "basic":
            pair = f"{quote_plus(client_id)}:{quote_plus(secret)}".encode()
            headers["Authorization"] = "Basic " + base64.b64encode(pair).decode("ascii")
        else:
            form.update(client_id=client_id, client_secret=secret)
        outgoing = Outgoing("POST", self._request.path, body=form, form=True, headers=headers)
        self.token_requests += 1
        reply = await self._session.send("token", outgoing, _no_headers)
        answer = reply.document if isinstance(reply.document, dict) else {}
        token = answer.get("access_token")
        if not isinstance(token, str) or not token.strip():
            raise DeviceAuthError(
                f"{self._backend}: the token endpoint's answer holds no access_token"
            )
        self._session.redactor.add(token)
        lifetime = answer.get("expires_in")
        if isinstance(lifetime, bool) or not isinstance(lifetime, int | float) or lifetime <= 0:
            lifetime = DEFAULT_LIFETIME
        self._token = token
        self._renew_at = self._clock() + lifetime - min(30.0, RENEW_EARLY * lifetime)


async def _no_headers() -> dict[str, str]:
    return {}


def _header(auth: AuthSpec, token: str) -> dict[str, str]:
    return {auth.header: f"{auth.scheme} {token}" if auth.scheme else token}


#: what a REST backend authenticates with
Credentials = StaticToken | ClientCredentials


def make_credentials(
    backend: str,
    profile: DeviceProfile,
    session: DeviceSession,
    environ: Mapping[str, str],
    *,
    token_env: str | None,
    client_id_env: str | None,
    client_secret_env: str | None,
) -> Credentials:
    """The credentials the profile asks for, from the variables the configuration names;
    a :class:`ConfigError` when a needed variable name is missing."""
    auth = profile.auth
    if auth.kind == "client_credentials":
        assert auth.token_request is not None  # the profile checks it
        if client_id_env is None or client_secret_env is None:
            raise ConfigError(
                f"backend {backend!r}: profile {profile.device.name!r} authenticates with "
                "OAuth client credentials: set client_id_env and client_secret_env to the "
                "NAMES of the variables holding them"
            )
        return ClientCredentials(
            backend=backend, auth=auth, request=auth.token_request, id_env=client_id_env,
            secret_env=client_secret_env, environ=environ, session=session,
        )  # fmt: skip
    if token_env is None:
        raise ConfigError(
            f"backend {backend!r}: set token_env to the NAME of the variable holding the token"
        )
    return StaticToken(
        backend=backend, auth=auth, token_env=token_env, environ=environ,
        redactor=session.redactor,
    )  # fmt: skip
