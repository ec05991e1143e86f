"""Who may call what in lab mode: THE one table of roles (:data:`ACCESS`) and its one check.

:data:`ACCESS` maps (HTTP method, route path as FastAPI declares it) to the roles allowed, any
one of them sufficing, or to ``None`` for the few public routes (signing in, the page and its
static files). :class:`AccessCheck`, one middleware in front of every route of the app, enforces
it before the route runs, before FastAPI even parses the body (a dependency would run after
that, so an unauthenticated malformed body would be answered 422, not 401):

- no live session → 401 (and the stale cookie is cleared);
- a route missing from the table → 403 (fail closed; a test walks ``app.routes``);
- none of the caller's roles allowed → 403, audited ``forbidden``;
- a write (POST, PUT, PATCH, DELETE) other than signing in without the session's CSRF token in
  ``X-CSRF-Token`` → 403, audited ``csrf_refused`` (OWASP CSRF Prevention Cheat Sheet:
  synchronizer token; SameSite=Strict cookies and the Origin check of
  :class:`~reporting.web.guard.Guard` stand in front of it);
- a temporary password (set by an admin) → 403 on everything but the session routes, until the
  user changes it.

A route learns who called through :func:`caller` (``Depends(caller)``, or :data:`CallerDep`).
Deny by default and check every request on the server: OWASP Authorization Cheat Sheet;
21 CFR 11.10(d) and (g) (access limited to authorised individuals, authority checks).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Annotated

from fastapi import Depends, Request
from starlette.concurrency import run_in_threadpool
from starlette.responses import JSONResponse
from starlette.routing import Match, Router
from starlette.types import ASGIApp, Receive, Scope, Send

from reporting.store import audit
from reporting.store.canonical import Origin
from reporting.store.sessions import Live, Refused
from reporting.store.users import Person, Role
from reporting.web.guard import WRITES
from reporting.web.handlers import refused
from reporting.web.lab.context import (
    CSRF_HEADER,
    clear_session_cookie,
    client_address,
    lab_of,
    session_token,
)

log = logging.getLogger(__name__)

Roles = frozenset[Role]

ANY_ROLE: Roles = frozenset(Role)
"""Every signed-in user."""
EDITORS: Roles = frozenset({Role.SONOGRAPHER, Role.READER})
"""Those who enter data and scores."""
READERS: Roles = frozenset({Role.READER})
"""Those who sign, amend and add addenda."""
ADMINS: Roles = frozenset({Role.ADMIN})
"""Those who manage users and read settings and the whole audit trail."""
ASSIGNERS: Roles = frozenset({Role.READER, Role.ADMIN})
"""Those who assign a study to a reader."""
PUBLIC = None
"""No session needed."""

ACCESS: dict[tuple[str, str], Roles | None] = {
    # the page and its files (the page itself shows the sign-in form)
    ("GET", "/"): PUBLIC,
    ("GET", "/static"): PUBLIC,
    ("GET", "/openapi.json"): ANY_ROLE,
    # signing in and out (web/lab/auth.py)
    ("POST", "/api/session"): PUBLIC,
    ("GET", "/api/session"): ANY_ROLE,
    ("DELETE", "/api/session"): ANY_ROLE,
    ("PUT", "/api/session/password"): ANY_ROLE,
    # administration (web/lab/admin.py)
    ("GET", "/api/users"): ADMINS,
    ("POST", "/api/users"): ADMINS,
    ("POST", "/api/users/{name}/unlock"): ADMINS,
    ("GET", "/api/settings"): ADMINS,
    ("GET", "/api/audit"): ADMINS,
    # the study workflow (web/lab/studies.py), as agreed in the lab design
    ("GET", "/api/worklist"): ANY_ROLE,
    ("POST", "/api/studies"): EDITORS,
    ("GET", "/api/studies/{study_id}"): ANY_ROLE,
    ("PUT", "/api/studies/{study_id}"): EDITORS,
    ("GET", "/api/studies/{study_id}/versions/{number}"): ANY_ROLE,
    ("POST", "/api/studies/{study_id}/sign"): READERS,
    ("POST", "/api/studies/{study_id}/amend"): READERS,
    ("POST", "/api/studies/{study_id}/addendum"): READERS,
    ("GET", "/api/studies/{study_id}/pdf"): ANY_ROLE,
    ("GET", "/api/studies/{study_id}/history"): ANY_ROLE,
    ("PUT", "/api/studies/{study_id}/assignment"): ASSIGNERS,
    ("POST", "/api/analyze"): EDITORS,
    ("GET", "/api/phrases"): EDITORS,
    ("POST", "/api/impression/confirm"): EDITORS,
}
"""(method, route path) → roles allowed (any one suffices); ``None``: public."""

SIGN_IN = ("POST", "/api/session")
SESSION_ROUTES = frozenset({("GET", "/api/session"), ("DELETE", "/api/session")}) | {
    ("PUT", "/api/session/password")
}
"""What a user with a temporary password may still do."""


@dataclass(frozen=True)
class Caller:
    """The signed-in user calling a route, with their session and network address."""

    person: Person
    session: str
    """The SHA-256 of the session's token (the token itself is never kept)."""
    address: str


def caller(request: Request) -> Caller:
    """The :class:`Caller` of a route that needs a session (set by :class:`AccessCheck`)."""
    found = getattr(request.state, "caller", None)
    if not isinstance(found, Caller):  # a public route asking for a caller: a programming error
        raise RuntimeError(f"{request.method} {request.url.path} has no signed-in caller")
    return found


CallerDep = Annotated[Caller, Depends(caller)]
"""``who: CallerDep`` in a route's parameters."""


def route_key(router: Router, scope: Scope) -> tuple[str, str] | None:
    """(method, route path) of the route that will answer ``scope``; ``None`` when none will."""
    method = "GET" if scope["method"] == "HEAD" else scope["method"]
    for route in router.routes:
        match, _ = route.matches(scope)
        if match == Match.FULL:
            return method, str(getattr(route, "path", ""))
    return None


class AccessCheck:
    """ASGI middleware applying :data:`ACCESS` to every request (see the module docstring).

    ``router`` is the app's router (read at each request, so routers included later count).
    """

    def __init__(
        self,
        app: ASGIApp,
        *,
        router: Router,
        access: dict[tuple[str, str], Roles | None] | None = None,
    ) -> None:
        self.app = app
        self.router = router
        self.access = ACCESS if access is None else access

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        key = route_key(self.router, scope)
        path = scope["path"]
        if key is not None and key in self.access and self.access[key] is PUBLIC:
            await self.app(scope, receive, send)
            return
        if key is None and not path.startswith("/api"):
            await self.app(scope, receive, send)  # not found, or method not allowed
            return
        request = Request(scope)
        lab = lab_of(request)
        address = client_address(request)
        token = session_token(request)

        def decide() -> tuple[Live | Refused, JSONResponse | None]:
            # the session and the route's rules in one trip to a worker thread (each trip costs
            # a thread hand-off and an event-loop wake-up; benchmarks/bench_lab_page.py)
            checked = lab.sessions.check(token, address)
            if isinstance(checked, Refused) or key is None:
                return checked, None
            return checked, self._refusal(checked, key, request, address)

        checked, refusal = await run_in_threadpool(decide)
        if isinstance(checked, Refused):
            response = refused(401, checked.why, [])
            clear_session_cookie(response, request)
            await response(scope, receive, send)
            return
        if key is None:  # a signed-in user asking for an /api path that does not exist
            await self.app(scope, receive, send)
            return
        if refusal is not None:
            await refusal(scope, receive, send)
            return
        scope.setdefault("state", {})["caller"] = Caller(
            person=checked.person, session=checked.token_sha256, address=address
        )
        await self.app(scope, receive, send)

    def _refusal(
        self, live: Live, key: tuple[str, str], request: Request, address: str
    ) -> JSONResponse | None:
        """The 403 for ``live`` calling ``key``, audited where the design asks; None: allowed."""
        method, path = key
        if key not in self.access:
            log.error("route %s %s is missing from ACCESS: refused", method, path)
            return refused(
                403, f"{method} {path} is not open to anyone (not in the access table)", []
            )
        allowed = self.access[key] or frozenset()
        who = live.person
        if not who.roles & allowed:
            self._audit(request, "forbidden", who.name, address, method, path)
            needed = " or ".join(sorted(r.value for r in allowed))
            return refused(403, f"{method} {path} needs the role {needed}", [])
        if method in WRITES and key != SIGN_IN:
            lab = lab_of(request)
            if not lab.sessions.csrf_ok(live, request.headers.get(CSRF_HEADER)):
                self._audit(request, "csrf_refused", who.name, address, method, path)
                return refused(
                    403,
                    "the request lacks this session's CSRF token (X-CSRF-Token); reload the page",
                    [],
                )
        if who.must_change_password and key not in SESSION_ROUTES:
            return refused(403, "change your temporary password first", [])
        return None

    @staticmethod
    def _audit(
        request: Request, action: str, actor: str, address: str, method: str, path: str
    ) -> None:
        with lab_of(request).db.write() as session:
            audit.append(
                session,
                action=action,
                actor=actor,
                origin=Origin.WEB,
                detail={"address": address, "method": method, "path": path},
            )
