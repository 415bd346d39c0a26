"""The read-only web view of a keep: a starlette app over :mod:`jobkeeper.web.views`,
pages rendered by Jinja2 with autoescaping, JSON under ``/api`` in the shapes of the
command line's ``--json``.

What it guarantees whatever the page (:class:`Guard`, outermost):

- only GET and HEAD; any other method gets 405 before any handler runs;
- with an access token, every request must carry it (``Authorization: Bearer``, or the
  cookie set by opening any page once with ``?token=``), compared in constant time; the
  token is never logged or rendered;
- without one (loopback only), the ``Host`` header must name a loopback address, so that
  a web page elsewhere cannot read the view through a DNS name pointed at 127.0.0.1;
- a Content-Security-Policy that allows nothing but the app's own stylesheet and inline
  images: no script at all, nothing from any other origin.
"""

from __future__ import annotations

import hmac
import json
from collections.abc import Awaitable, Callable, MutableMapping
from http.cookies import SimpleCookie
from importlib import resources
from typing import TYPE_CHECKING, Any
from urllib.parse import parse_qsl, urlencode

from jinja2 import Environment, PackageLoader, select_autoescape
from starlette.applications import Starlette
from starlette.requests import Request
from starlette.responses import HTMLResponse, JSONResponse, PlainTextResponse, Response
from starlette.routing import Route

from jobkeeper.exceptions import AmbiguousJobId, ConfigError, JobkeeperError, JobNotFound
from jobkeeper.web import views

if TYPE_CHECKING:
    from jobkeeper.keeper import Keeper

Scope = MutableMapping[str, Any]
Message = MutableMapping[str, Any]
Receive = Callable[[], Awaitable[Message]]
Send = Callable[[Message], Awaitable[None]]
ASGIApp = Callable[[Scope, Receive, Send], Awaitable[None]]

CSP = ("default-src 'none'; style-src 'self'; img-src 'self' data:; form-action 'self'; "
       "base-uri 'none'; frame-ancestors 'none'")  # fmt: skip
SECURITY_HEADERS = [
    (b"content-security-policy", CSP.encode()),
    (b"x-content-type-options", b"nosniff"),
    (b"referrer-policy", b"no-referrer"),
    (b"cache-control", b"no-store"),
    (b"cross-origin-opener-policy", b"same-origin"),
    (b"cross-origin-resource-policy", b"same-origin"),
]
TOKEN_COOKIE = "jobkeeper_view"
LOOPBACK_HOSTS = {"127.0.0.1", "localhost", "[::1]", "::1"}


class Guard:
    """Methods, the access token or the loopback Host check, and the security headers
    (see the module docstring)."""

    def __init__(self, app: ASGIApp, *, token: str | None) -> None:
        self.app = app
        self._token = None if token is None else token.encode()

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return

        async def send_secured(message: Message) -> None:
            if message["type"] == "http.response.start":
                message["headers"] = [*message.get("headers", []), *SECURITY_HEADERS]
            await send(message)

        refusal = self._refusal(scope)
        if refusal is None and self._token is not None:
            refusal = self._token_refusal(scope)
        if refusal is not None:
            await refusal(scope, receive, send_secured)
            return
        await self.app(scope, receive, send_secured)

    def _refusal(self, scope: Scope) -> Response | None:
        if scope["method"] not in ("GET", "HEAD"):
            return PlainTextResponse("read-only: only GET and HEAD", 405,
                                     headers={"Allow": "GET, HEAD"})  # fmt: skip
        if self._token is None:
            host = _header(scope, b"host").rsplit(":", 1)[0] if _header(scope, b"host") else ""
            if host.lower() not in LOOPBACK_HOSTS:
                return PlainTextResponse("this view answers on a loopback address only", 421)
        return None

    def _token_refusal(self, scope: Scope) -> Response | None:
        assert self._token is not None
        query = parse_qsl(scope.get("query_string", b"").decode("latin-1"))
        given = dict(query).get("token")
        if given is not None:
            if not hmac.compare_digest(given.encode(), self._token):
                return PlainTextResponse("wrong access token", 401)
            # Take the token out of the address (and the browser's history) at once.
            rest = urlencode([(k, v) for k, v in query if k != "token"])
            response = Response(status_code=303, headers={"Location": scope["path"] + (
                "?" + rest if rest else "")})  # fmt: skip
            response.set_cookie(TOKEN_COOKIE, given, httponly=True, samesite="strict")
            return response
        auth = _header(scope, b"authorization")
        candidate = auth[7:] if auth.lower().startswith("bearer ") else None
        if candidate is None:
            cookie: SimpleCookie = SimpleCookie()
            try:
                cookie.load(_header(scope, b"cookie"))
            except Exception:
                cookie = SimpleCookie()
            morsel = cookie.get(TOKEN_COOKIE)
            candidate = None if morsel is None else morsel.value
        if candidate is None or not hmac.compare_digest(candidate.encode(), self._token):
            return PlainTextResponse(
                "this view needs its access token: open it once with ?token=…", 401,
                headers={"WWW-Authenticate": "Bearer"},
            )  # fmt: skip
        return None


def _header(scope: Scope, name: bytes) -> str:
    for key, value in scope.get("headers", []):
        if key == name:
            return bytes(value).decode("latin-1")
    return ""


def templates() -> Environment:
    """The page templates, every value autoescaped."""
    return Environment(
        loader=PackageLoader("jobkeeper.web", "templates"),
        autoescape=select_autoescape(["html"], default=True),
        trim_blocks=True,
        lstrip_blocks=True,
    )


def stylesheet() -> str:
    return resources.files("jobkeeper.web").joinpath("static/style.css").read_text("utf-8")


def create_app(keeper: Keeper, *, token: str | None = None) -> ASGIApp:
    """The web view of ``keeper``; with ``token``, every request must carry it."""
    env = templates()
    css = stylesheet()
    keep_name = keeper.path.resolve().name or str(keeper.path)

    def page(
        name: str, page_id: str, title: str, data: dict[str, Any], status: int = 200
    ) -> Response:
        html = env.get_template(name).render(page=page_id, title=title, keep_name=keep_name, **data)
        return HTMLResponse(html, status)

    def failure(request: Request, exc: JobkeeperError) -> Response:
        status = 404 if isinstance(exc, JobNotFound) else 400
        if isinstance(exc, (ConfigError, AmbiguousJobId)):
            status = 400
        if request.url.path.startswith("/api/"):
            return JSONResponse({"error": str(exc)}, status)
        return page("error.html", "", "Not found" if status == 404 else "Cannot show this",
                    {"message": str(exc)}, status)  # fmt: skip

    def handled(render: Callable[[Request], Response]) -> Callable[[Request], Response]:
        def endpoint(request: Request) -> Response:
            try:
                return render(request)
            except JobkeeperError as exc:
                return failure(request, exc)

        return endpoint

    def overview(request: Request) -> Response:
        return page("overview.html", "overview", "Overview", views.overview(keeper))

    def job_list(request: Request) -> Response:
        data = views.job_list(keeper, views.ListQuery.parse(request.query_params))
        return page("jobs.html", "jobs", "Jobs", data)

    def job(request: Request) -> Response:
        data = views.job_page(keeper, request.path_params["job_id"])
        return page("job.html", "jobs", f"Job {data['job']['id'][:12]}", data)

    def comparison(request: Request) -> Response:
        data = views.comparison_page(keeper, request.path_params["comparison_id"])
        return page("comparison.html", "jobs", f"Comparison {data['c'].id[:12]}", data)

    def log(request: Request) -> Response:
        return page("log.html", "log", "Log", {"log": views.log_summary(keeper), "report": None})

    def log_verify(request: Request) -> Response:
        report = views.report_view(keeper.verify())
        data = {"log": views.log_summary(keeper), "report": report,
                "command": f"jobkeeper verify --all --keep {keeper.path}"}  # fmt: skip
        return page("log.html", "log", "Log verified now", data)

    def style(request: Request) -> Response:
        return Response(css, media_type="text/css")

    def api_overview(request: Request) -> Response:
        return _json(views.overview_json(views.overview(keeper)))

    def api_jobs(request: Request) -> Response:
        query = views.ListQuery.parse(request.query_params)
        data = views.job_list(keeper, query)
        headers = (
            {"Link": f'<{data["next_url"].replace("/jobs", "/api/jobs", 1)}>; rel="next"'}
            if data["next_url"]
            else {}
        )
        return _json([views.job_json(r) for r in data["records"]], headers)

    def api_job(request: Request) -> Response:
        data = views.job_page(keeper, request.path_params["job_id"])
        return _json(data["details"])

    def api_comparison(request: Request) -> Response:
        return _json(views.comparison_page(keeper, request.path_params["comparison_id"])["json"])

    def api_verify(request: Request) -> Response:
        return _json(keeper.verify().to_dict())

    routes = [
        Route("/", handled(overview)),
        Route("/jobs", handled(job_list)),
        Route("/jobs/{job_id}", handled(job)),
        Route("/comparisons/{comparison_id}", handled(comparison)),
        Route("/log", handled(log)),
        Route("/log/verify", handled(log_verify)),
        Route("/static/style.css", style),
        Route("/api/overview", handled(api_overview)),
        Route("/api/jobs", handled(api_jobs)),
        Route("/api/jobs/{job_id}", handled(api_job)),
        Route("/api/comparisons/{comparison_id}", handled(api_comparison)),
        Route("/api/verify", handled(api_verify)),
    ]
    return Guard(Starlette(routes=routes), token=token)


def _json(value: Any, headers: dict[str, str] | None = None) -> Response:
    body = json.dumps(value, indent=2, sort_keys=False) + "\n"
    return Response(body, media_type="application/json", headers=headers)


__all__ = ["CSP", "Guard", "create_app", "stylesheet", "templates"]
