"""Signing in and out of the lab page, and changing one's password.

``POST /api/session`` checks the user's password (argon2, in a worker thread so the event loop
keeps answering) and starts a NEW server-side session (:class:`~reporting.store.sessions.
WebSessions`): any session cookie the browser brought is ended, never reused (session fixation;
OWASP Session Management Cheat Sheet, "renew the session ID after any privilege level change").
An unknown user, a wrong password and a locked account get the very same 401 (the audit trail
says which), so the page does not tell a guesser which names exist; too many failures from one
address get 429 with ``Retry-After`` (:mod:`reporting.web.lab.throttle`). ``GET`` tells the page
who is signed in and its CSRF token, ``DELETE`` signs out (the session ends in the store, so a
copied cookie is useless afterwards), ``PUT /api/session/password`` changes the password and
ends every session of that user (sign in again).
"""

from __future__ import annotations

import logging

from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse, Response
from pydantic import BaseModel, ConfigDict, Field
from starlette.concurrency import run_in_threadpool

from reporting.store.canonical import Origin
from reporting.store.errors import AuthError
from reporting.store.users import MAX_PASSWORD_CHARS, Person, Role, authenticate, set_password
from reporting.web.api import ProblemList
from reporting.web.handlers import refused
from reporting.web.lab.access import CallerDep
from reporting.web.lab.context import (
    clear_session_cookie,
    client_address,
    lab_of,
    session_token,
    set_session_cookie,
)

log = logging.getLogger(__name__)

router = APIRouter()

SIGN_IN_REFUSED = (
    "the user name or password is wrong, or the account is locked after repeated wrong "
    "passwords (it opens again after a while, or an admin unlocks it)"
)
"""The one answer to every failed sign-in."""


class _Body(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class SignIn(_Body):
    """A sign-in: user name and password."""

    user: str = Field(min_length=1, max_length=200, description="The user's name (their id).")
    password: str = Field(
        min_length=1, max_length=MAX_PASSWORD_CHARS, description="The user's password."
    )


class PasswordChange(_Body):
    """A password change: the current password, then the new one."""

    old: str = Field(
        min_length=1, max_length=MAX_PASSWORD_CHARS, description="The current password."
    )
    new: str = Field(min_length=1, max_length=MAX_PASSWORD_CHARS, description="The new password.")


class SessionInfo(_Body):
    """Who is signed in, and what the page needs to act for them."""

    user: str = Field(description="The user's name (their id).")
    full_name: str = Field(description="The name printed on signed reports.")
    roles: list[Role] = Field(description="The user's roles.")
    csrf_token: str = Field(description="Send it as X-CSRF-Token with every change.")
    idle_timeout_seconds: int = Field(
        description="The session ends after this long without a request."
    )
    must_change_password: bool = Field(
        description="The password is temporary: change it before anything else."
    )


REFUSED_SIGN_IN: dict[int | str, dict[str, object]] = {
    401: {"model": ProblemList, "description": "Wrong name or password, or a locked account."},
    429: {"model": ProblemList, "description": "Too many failures from this address; wait."},
}


def session_info(request: Request, who: Person, csrf_token: str) -> SessionInfo:
    return SessionInfo(
        user=who.name,
        full_name=who.full_name,
        roles=sorted(who.roles),
        csrf_token=csrf_token,
        idle_timeout_seconds=lab_of(request).settings.session_idle_minutes * 60,
        must_change_password=who.must_change_password,
    )


@router.post(
    "/api/session",
    response_model=SessionInfo,
    responses=REFUSED_SIGN_IN,
    summary="Sign in (the only route open without a session)",
)
async def sign_in(body: SignIn, request: Request) -> Response:
    lab = lab_of(request)
    address = client_address(request)
    wait = lab.throttle.wait_seconds(address)
    if wait:
        return refused(
            429,
            f"too many failed sign-ins from this computer; try again in {wait} seconds",
            [],
            headers={"retry-after": str(wait)},
        )
    try:
        who = await run_in_threadpool(
            authenticate,
            lab.db,
            body.user,
            body.password,
            origin=Origin.WEB,
            settings=lab.settings,
            failed_action="sign_in_failed",
            address=address,
        )
    except AuthError:
        lab.throttle.failed(address)
        return refused(401, SIGN_IN_REFUSED, [])
    opened = await run_in_threadpool(
        lab.sessions.open, who, address, replaces=session_token(request)
    )
    answer = session_info(request, who, opened.csrf_token)
    response = JSONResponse(answer.model_dump(mode="json"))
    set_session_cookie(response, request, opened.token)
    log.info("%s signed in from %s", who.name, address)
    return response


@router.get("/api/session", response_model=SessionInfo, summary="Who is signed in")
async def current(request: Request, who: CallerDep) -> SessionInfo:
    token = session_token(request) or ""
    csrf = await run_in_threadpool(lab_of(request).sessions.csrf_token, token)
    return session_info(request, who.person, csrf)


@router.delete("/api/session", status_code=204, summary="Sign out (the session ends for good)")
async def sign_out(request: Request, who: CallerDep) -> Response:
    lab = lab_of(request)
    await run_in_threadpool(lab.sessions.end, who.session, who.person.name, who.address)
    response = Response(status_code=204)
    clear_session_cookie(response, request)
    return response


@router.put(
    "/api/session/password",
    status_code=204,
    responses={403: {"model": ProblemList, "description": "The current password is wrong."}},
    summary="Change your password (every session of yours ends; sign in again)",
)
async def change_password(body: PasswordChange, request: Request, who: CallerDep) -> Response:
    lab = lab_of(request)
    name = who.person.name
    try:
        await run_in_threadpool(
            authenticate,
            lab.db,
            name,
            body.old,
            origin=Origin.WEB,
            settings=lab.settings,
            failed_action="password_change_failed",
            address=who.address,
        )
    except AuthError:
        # counts towards the lockout like any wrong password (a locked account's sessions end)
        return refused(403, "the current password is wrong", [])
    await run_in_threadpool(
        set_password, lab.db, name, body.new, temporary=False, actor=name, origin=Origin.WEB
    )
    response = Response(status_code=204)
    clear_session_cookie(response, request)
    return response
