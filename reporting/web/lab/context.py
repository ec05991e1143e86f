"""What the lab app's routes share: the store, its sessions, the lab settings, the sign-in
throttle and how the session cookie is set (:class:`Lab`, kept in ``app.state.lab``).

The cookie is HttpOnly (no script reads it), SameSite=Strict (no other site's page sends it),
Path=/, without an expiry (the browser drops it when closed; the server ends the session anyway),
and Secure whenever the page is served over TLS, directly or by the trusted proxy; a Secure cookie
takes the ``__Host-`` prefix, which browsers accept only from a secure origin, for path / and
without a Domain (RFC 6265bis, cookie prefixes; OWASP Session Management Cheat Sheet).
"""

from __future__ import annotations

from dataclasses import dataclass

from fastapi import Request
from starlette.responses import Response

from reporting.phrases import PhraseLibrary
from reporting.settings import Settings
from reporting.store.engine import Database
from reporting.store.sessions import WebSessions
from reporting.web.lab.throttle import AddressThrottle

COOKIE = "segreport_session"
SECURE_COOKIE = "__Host-segreport_session"
CSRF_HEADER = "x-csrf-token"


@dataclass(frozen=True)
class Lab:
    """The lab app's shared parts. ``secure_cookies``: True under TLS, False on plain http to
    loopback, None behind a trusted proxy (Secure when the proxy says the request was https)."""

    db: Database
    settings: Settings
    sessions: WebSessions
    throttle: AddressThrottle
    secure_cookies: bool | None
    phrases: PhraseLibrary | None = None
    """The lab's phrase library (``--phrases``), None: the built-in starter set."""
    phrases_source: str = "built-in"
    """The phrase library's file name as the page shows it."""


def lab_of(request: Request) -> Lab:
    """The :class:`Lab` of the app answering ``request``."""
    lab = request.app.state.lab
    assert isinstance(lab, Lab)
    return lab


def is_secure(lab: Lab, scheme: str) -> bool:
    return lab.secure_cookies if lab.secure_cookies is not None else scheme == "https"


def cookie_name(lab: Lab, scheme: str) -> str:
    return SECURE_COOKIE if is_secure(lab, scheme) else COOKIE


def session_token(request: Request) -> str | None:
    """The session token the browser sent (only the cookie name this connection may carry)."""
    return request.cookies.get(cookie_name(lab_of(request), request.url.scheme))


def set_session_cookie(response: Response, request: Request, token: str) -> None:
    lab = lab_of(request)
    response.set_cookie(
        cookie_name(lab, request.url.scheme),
        token,
        path="/",
        httponly=True,
        samesite="strict",
        secure=is_secure(lab, request.url.scheme),
    )


def clear_session_cookie(response: Response, request: Request) -> None:
    lab = lab_of(request)
    response.delete_cookie(
        cookie_name(lab, request.url.scheme),
        path="/",
        httponly=True,
        samesite="strict",
        secure=is_secure(lab, request.url.scheme),
    )


def client_address(request: Request) -> str:
    """The caller's network address (the proxy's client when the proxy is trusted)."""
    return request.client.host if request.client else "unknown"
