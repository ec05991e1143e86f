"""Users, roles and passwords (argon2id through argon2-cffi; never stored or logged in clear).

A user is named by a unique id and signs with that id plus a password re-entered at each signing
(21 CFR 11.200). After :data:`MAX_FAILED_ATTEMPTS` wrong passwords in a row the account is locked
until an admin unlocks it (11.300); every failure is an audit event. A password set by an admin
(``reset-password``, or a new account) is temporary: it cannot sign until its owner changes it.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable
from dataclasses import dataclass
from enum import StrEnum
from functools import cache
from typing import TYPE_CHECKING

from sqlalchemy import select
from sqlalchemy.orm import Session

from reporting.store import audit
from reporting.store.canonical import Origin, now
from reporting.store.engine import Database
from reporting.store.errors import AuthError, StoreError
from reporting.store.schema import User

if TYPE_CHECKING:
    from argon2 import PasswordHasher

log = logging.getLogger(__name__)

MAX_FAILED_ATTEMPTS = 5
"""Wrong passwords in a row that lock an account (common practice)."""
MIN_PASSWORD_CHARS = 10
"""Shortest password accepted (common practice)."""


class Role(StrEnum):
    """What a user may do."""

    READER = "reader"
    """Reading physician: imports, signs and amends reports."""
    SONOGRAPHER = "sonographer"
    """Acquires studies: imports them."""
    ADMIN = "admin"
    """Manages users."""


@dataclass(frozen=True)
class Person:
    """An authenticated user, detached from the database session."""

    name: str
    full_name: str
    roles: frozenset[Role]
    must_change_password: bool


@cache
def hasher() -> PasswordHasher:
    from argon2 import PasswordHasher

    return PasswordHasher()


def hash_password(password: str, where: str) -> str:
    check_new_password(password, where)
    return hasher().hash(password)


def check_new_password(password: str, where: str) -> None:
    if len(password) < MIN_PASSWORD_CHARS:
        raise StoreError(where, f"the password must have at least {MIN_PASSWORD_CHARS} characters")
    if password != password.strip():
        raise StoreError(where, "the password must not start or end with a space")


def roles_text(roles: Iterable[Role]) -> str:
    return ",".join(sorted({Role(r).value for r in roles}))


def person(user: User) -> Person:
    return Person(
        name=user.name,
        full_name=user.full_name,
        roles=frozenset(Role(r) for r in user.roles.split(",") if r),
        must_change_password=user.must_change_password,
    )


def find(session: Session, name: str) -> User | None:
    return session.scalars(select(User).where(User.name == name)).first()


def create(
    session: Session,
    name: str,
    *,
    full_name: str,
    roles: Iterable[Role],
    password: str,
    temporary: bool,
    actor: str | None,
    origin: Origin,
) -> User:
    """Add a user (inside a writing transaction) and its audit event."""
    where = f"user {name}"
    if find(session, name) is not None:
        raise StoreError(where, "already exists")
    user = User(
        name=name,
        full_name=full_name,
        roles=roles_text(roles),
        password_hash=hash_password(password, where),
        must_change_password=temporary,
        failed_attempts=0,
        locked=False,
        created_at=now(),
    )
    session.add(user)
    session.flush()
    audit.append(
        session,
        action="user_add",
        actor=actor or name,
        origin=origin,
        detail={"user": name, "full_name": full_name, "roles": user.roles},
    )
    return user


def authenticate(
    db: Database, name: str, password: str, *, role: Role | None = None, origin: Origin
) -> Person:
    """The user ``name`` if ``password`` is theirs and the account is open; else :class:`AuthError`.

    A wrong password counts towards the lockout and is recorded as an audit event (committed even
    though the command then fails).
    """
    from argon2.exceptions import InvalidHashError, VerificationError

    where = f"--as {name}"
    with db.read() as session:
        user = find(session, name)
        found = None if user is None else (user.password_hash, user.locked, person(user))
    if found is None:
        _failure(db, name, "unknown user", origin, known=False)
        raise AuthError(where, "unknown user (or wrong password)")
    stored, locked, who = found
    if locked:
        raise AuthError(
            where, "the account is locked; an admin must unlock it (`store user unlock`)"
        )
    try:
        hasher().verify(stored, password)
    except (VerificationError, InvalidHashError):
        now_locked = _failure(db, name, "wrong password", origin, known=True)
        suffix = "; the account is now locked" if now_locked else ""
        raise AuthError(where, f"wrong password{suffix}") from None
    if who.roles and role is not None and role not in who.roles:
        raise AuthError(where, f"needs the {role.value} role to do this")
    with db.write() as session:
        user = find(session, name)
        assert user is not None
        if user.failed_attempts:
            user.failed_attempts = 0
        if hasher().check_needs_rehash(stored):
            user.password_hash = hasher().hash(password)
    return who


def _failure(db: Database, name: str, why: str, origin: Origin, *, known: bool) -> bool:
    """Record a failed sign-in; lock the account at the limit. True when it is now locked."""
    with db.write() as session:
        locked = False
        if known:
            user = find(session, name)
            assert user is not None
            user.failed_attempts += 1
            locked = user.failed_attempts >= MAX_FAILED_ATTEMPTS
            user.locked = locked
        audit.append(
            session,
            action="auth_failed",
            actor=None,
            origin=origin,
            detail={"user": name, "why": why},
        )
        if locked:
            audit.append(
                session, action="user_locked", actor=None, origin=origin, detail={"user": name}
            )
    log.info("failed sign-in for %s: %s", name, why)
    return locked


def set_password(
    db: Database,
    name: str,
    password: str,
    *,
    temporary: bool,
    actor: str,
    origin: Origin,
) -> None:
    """Set ``name``'s password (``temporary`` when an admin resets it) and unlock the account."""
    with db.write() as session:
        user = find(session, name)
        if user is None:
            raise StoreError(f"user {name}", "unknown user")
        user.password_hash = hash_password(password, f"user {name}")
        user.must_change_password = temporary
        user.failed_attempts = 0
        audit.append(
            session,
            action="password_reset" if temporary else "password_change",
            actor=actor,
            origin=origin,
            detail={"user": name},
        )


def unlock(db: Database, name: str, *, actor: str, origin: Origin) -> None:
    with db.write() as session:
        user = find(session, name)
        if user is None:
            raise StoreError(f"user {name}", "unknown user")
        user.locked = False
        user.failed_attempts = 0
        audit.append(
            session, action="user_unlock", actor=actor, origin=origin, detail={"user": name}
        )


def add(
    db: Database,
    name: str,
    *,
    full_name: str,
    roles: Iterable[Role],
    password: str,
    actor: str,
    origin: Origin,
) -> None:
    with db.write() as session:
        create(
            session,
            name,
            full_name=full_name,
            roles=roles,
            password=password,
            temporary=True,
            actor=actor,
            origin=origin,
        )
