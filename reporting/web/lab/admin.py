"""The admin's routes in lab mode: users (list, add, unlock), the settings in effect, the audit
trail page by page. Only users with the admin role reach them (:data:`~reporting.web.lab.access.
ACCESS`); every change is an audited event of the store, made by the same functions the
``segreport store user …`` commands call.
"""

from __future__ import annotations

import logging
from typing import Annotated, Any

from fastapi import APIRouter, Query, Request
from fastapi.responses import JSONResponse
from pydantic import BaseModel, ConfigDict, Field
from sqlalchemy import select
from starlette.concurrency import run_in_threadpool

from reporting.store import users
from reporting.store.audit import body_of
from reporting.store.canonical import Origin
from reporting.store.errors import StoreError
from reporting.store.schema import EventRow, User
from reporting.store.users import MAX_PASSWORD_CHARS, Role
from reporting.web.api import REFUSED
from reporting.web.lab.access import CallerDep
from reporting.web.lab.context import lab_of

log = logging.getLogger(__name__)

router = APIRouter()

AUDIT_PAGE_MAX = 1000
"""Most audit events in one answer (paging, not a threshold)."""
USER_NAME = r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$"


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class UserListing(_Model):
    """A user as the admin sees them (never the password hash)."""

    name: str = Field(description="The user's name (their id).")
    full_name: str = Field(description="The name printed on signed reports.")
    roles: list[Role] = Field(description="The user's roles.")
    locked: bool = Field(description="Locked now after repeated wrong passwords.")
    locked_until: str | None = Field(
        description="When the lock ends by itself (UTC, ISO 8601); null when not locked, or "
        "locked until an admin unlocks it."
    )
    must_change_password: bool = Field(description="The password is temporary.")
    created_at: str = Field(description="When the user was added (ISO 8601).")


class NewUser(_Model):
    """A user to add, with a temporary password (they change it at first sign-in)."""

    name: str = Field(pattern=USER_NAME, description="The user's name (their id).")
    full_name: str = Field(min_length=1, max_length=200, description="Printed name.")
    roles: list[Role] = Field(min_length=1, description="Roles (at least one).")
    password: str = Field(
        min_length=1, max_length=MAX_PASSWORD_CHARS, description="Temporary password."
    )


class SettingInEffect(_Model):
    """One lab setting: its value and its source (or the lab's own value, saying so)."""

    value: Any = Field(description="The value in effect.")
    source: str = Field(description="Its published source, or the lab's own value and default.")


class AuditPage(_Model):
    """A page of the audit trail, oldest first."""

    events: list[dict[str, Any]] = Field(
        description="Events as hashed: seq, at, actor, action, study_id, version, origin, host, "
        "detail, prev_hash; with their hash."
    )
    next_after: int | None = Field(
        description="Pass as `after` for the next page; null at the end."
    )


def _listing(user: User) -> UserListing:
    locked = users.lock_in_effect(user)
    return UserListing(
        name=user.name,
        full_name=user.full_name,
        roles=sorted(users.person(user).roles),
        locked=locked,
        locked_until=user.locked_until if locked else None,
        must_change_password=user.must_change_password,
        created_at=user.created_at,
    )


def _user(request: Request, name: str) -> UserListing:
    with lab_of(request).db.read() as session:
        user = users.find(session, name)
        if user is None:
            raise StoreError(f"user {name}", "unknown user")
        return _listing(user)


@router.get("/api/users", response_model=list[UserListing], summary="Users (admin)")
def list_users(request: Request) -> list[UserListing]:
    with lab_of(request).db.read() as session:
        return [_listing(u) for u in session.scalars(select(User).order_by(User.name))]


@router.post(
    "/api/users",
    status_code=201,
    response_model=UserListing,
    responses=REFUSED,
    summary="Add a user with a temporary password (admin)",
)
async def add_user(body: NewUser, request: Request, who: CallerDep) -> JSONResponse:
    await run_in_threadpool(
        users.add,
        lab_of(request).db,
        body.name,
        full_name=body.full_name,
        roles=body.roles,
        password=body.password,
        actor=who.person.name,
        origin=Origin.WEB,
    )
    added = await run_in_threadpool(_user, request, body.name)
    return JSONResponse(added.model_dump(mode="json"), status_code=201)


@router.post(
    "/api/users/{name}/unlock",
    response_model=UserListing,
    responses=REFUSED,
    summary="Unlock a user after repeated wrong passwords (admin)",
)
def unlock_user(name: str, request: Request, who: CallerDep) -> UserListing:
    users.unlock(lab_of(request).db, name, actor=who.person.name, origin=Origin.WEB)
    return _user(request, name)


@router.get(
    "/api/settings",
    response_model=dict[str, SettingInEffect],
    summary="The lab settings in effect, each with its source (admin, read-only)",
)
def settings_in_effect(request: Request) -> dict[str, SettingInEffect]:
    lab = lab_of(request).settings
    values = lab.model_dump(mode="json")
    return {
        name: SettingInEffect(value=values[name], source=lab.cited(name))
        for name in type(lab).model_fields
    }


@router.get("/api/audit", response_model=AuditPage, summary="The audit trail, paged (admin)")
def audit_trail(
    request: Request,
    after: Annotated[int, Query(ge=0, description="Events after this sequence number.")] = 0,
    limit: Annotated[int, Query(ge=1, le=AUDIT_PAGE_MAX, description="Events at most.")] = 100,
) -> AuditPage:
    with lab_of(request).db.read() as session:
        rows = session.scalars(
            select(EventRow).where(EventRow.seq > after).order_by(EventRow.seq).limit(limit + 1)
        ).all()
        events = [body_of(r) | {"hash": r.hash} for r in rows[:limit]]
    more = len(rows) > limit
    return AuditPage(events=events, next_after=events[-1]["seq"] if more else None)
