"""The lab app (``segreport serve --db``): the shared reporting page over the store.

Built like the folder-mode app (:mod:`reporting.web.app`) from the same parts: the request
:class:`~reporting.web.guard.Guard` (Host names, cross-site requests, content type, body size,
security headers), the same error handlers (:mod:`reporting.web.handlers`) and the same OpenAPI
document; on top of them :class:`~reporting.web.lab.access.AccessCheck` applies the one access
table to every request. Routers: sign-in (:mod:`.auth`), administration (:mod:`.admin`) and the
study workflow (:mod:`.studies`, when present). Under TLS the page also sends
``Strict-Transport-Security`` (OWASP HTTP Headers Cheat Sheet).
"""

from __future__ import annotations

import logging
from collections.abc import Callable

from fastapi import APIRouter, FastAPI, Request
from fastapi.responses import HTMLResponse, JSONResponse
from fastapi.staticfiles import StaticFiles
from starlette.exceptions import HTTPException as StarletteHTTPException

from reporting import __version__
from reporting.errors import InputError, ReportingError
from reporting.phrases import PhraseLibrary
from reporting.settings import Settings
from reporting.store.engine import Database
from reporting.store.errors import AuthError, ConflictError
from reporting.store.sessions import Clock, WebSessions, utc_now
from reporting.web import guard, pages
from reporting.web.api import Problem, problem_of
from reporting.web.handlers import add_error_handlers, refused, use_study_openapi
from reporting.web.lab import admin, auth, studies
from reporting.web.lab.access import AccessCheck
from reporting.web.lab.context import Lab
from reporting.web.lab.throttle import AddressThrottle
from reporting.wording import CAUTIONS

log = logging.getLogger(__name__)

HSTS = "max-age=31536000"


def _located(problem: InputError | ReportingError) -> Problem:
    if isinstance(problem, InputError):
        return problem_of(problem, "study")
    return Problem(location="", path="", problem=str(problem))


def add_router(app: FastAPI, router: APIRouter) -> None:
    """Add ``router``'s routes to ``app`` itself, flat (paths as declared, no prefix).

    Recent FastAPI keeps an included router as one nested entry of ``app.routes``; flat routes
    keep ``app.routes`` a complete list for the access check, which matches each request to its
    route path, and for the test that walks it. A nested router would be refused (fail closed).
    """
    app.router.routes.extend(router.routes)
    changed = getattr(app.router, "_mark_routes_changed", None)
    if callable(changed):
        changed()


def create_lab_app(
    database: Database,
    *,
    settings: Settings,
    phrases: PhraseLibrary | None = None,
    phrases_source: str = "built-in",
    allowed_hosts: tuple[str, ...] = guard.LOOPBACK_HOSTS,
    secure_cookies: bool | None = False,
    max_body_bytes: int = guard.MAX_BODY_BYTES,
    clock: Clock = utc_now,
    monotonic: Callable[[], float] | None = None,
) -> FastAPI:
    """The lab app over the open store ``database``.

    ``secure_cookies``: True when served over TLS, False on plain http (loopback only), None
    behind a trusted TLS proxy (then per request, from the scheme the proxy reports).
    ``clock``/``monotonic`` are for tests (session idle time; throttle window).
    """
    throttle = AddressThrottle(
        failures=settings.sign_in_throttle_failures,
        window_minutes=settings.sign_in_throttle_minutes,
        **({"clock": monotonic} if monotonic is not None else {}),
    )
    app = FastAPI(
        title="segreport lab reporting",
        version=__version__,
        description="The lab's shared stress-echo reporting page. " + " ".join(CAUTIONS),
        docs_url=None,
        redoc_url=None,
    )
    app.state.lab = Lab(
        db=database,
        settings=settings,
        sessions=WebSessions(
            database,
            idle_minutes=settings.session_idle_minutes,
            max_hours=settings.session_max_hours,
            clock=clock,
        ),
        throttle=throttle,
        secure_cookies=secure_cookies,
        phrases=phrases,
        phrases_source=phrases_source,
    )
    # the last added runs first: the Guard refuses foreign hosts before any session is looked up
    app.add_middleware(AccessCheck, router=app.router)
    app.add_middleware(
        guard.Guard,
        max_body_bytes=max_body_bytes,
        allowed_hosts=allowed_hosts,
        extra_headers={"strict-transport-security": HSTS} if secure_cookies else {},
    )
    app.mount("/static", StaticFiles(packages=[("reporting.web", "static")]), name="static")
    add_error_handlers(app, located=_located, unnamed_file="store")

    @app.exception_handler(ConflictError)
    async def _conflict(request: Request, exc: ConflictError) -> JSONResponse:
        return refused(409, str(exc), [_located(exc)])

    @app.exception_handler(AuthError)
    async def _auth(request: Request, exc: AuthError) -> JSONResponse:
        return refused(403, str(exc), [_located(exc)])

    @app.exception_handler(StarletteHTTPException)
    async def _http(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        return refused(exc.status_code, str(exc.detail), [], headers=exc.headers)

    add_router(app, auth.router)
    add_router(app, admin.router)
    add_router(app, studies.router)
    page = pages.lab_page()  # the same for everyone (no person or study in it): rendered once

    @app.get("/", response_class=HTMLResponse, include_in_schema=False)
    async def lab_page() -> HTMLResponse:
        return HTMLResponse(page)

    use_study_openapi(app)
    return app
