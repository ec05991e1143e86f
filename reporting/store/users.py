"""Users, roles and passwords (argon2id through argon2-cffi; never stored or logged in clear).

A user is named by a unique id and signs with that id plus a password re-entered at each signing
(21 CFR 11.200). After :attr:`Settings.lockout_failures` wrong passwords in a row (signing in and
signing both count) the account is locked for :attr:`Settings.lockout_minutes`, or until an admin
unlocks it (11.300; NIST SP 800-63B 5.2.2); locking ends the user's browser sessions. Every failure
is an audit event whose actor is a keyed hash of the typed name
(:func:`reporting.store.sessions.keyed_name`), never the typed text, since passwords get typed
there; a known account is named in the event's detail. An unknown name costs the same password
hash as a known one, so timing does not tell which names exist (OWASP Authentication Cheat
Sheet). A password set by an admin (``reset-password``, or a new account) is temporary: it cannot
sign until its owner changes it; any password change ends the user's browser sessions.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import logging
from collections.abc import Iterable
from dataclasses import dataclass
from functools import cache
from typing import TYPE_CHECKING

from sqlalchemy import select
from sqlalchemy.orm import Session

from reporting.store import audit
from reporting.store.canonical import Origin, now
from reporting.store.engine import Database
from reporting.store.errors import AuthError, StoreError
from reporting.store.schema import User
from reporting.vocabulary import Vocabulary

if TYPE_CHECKING:
    from argon2 import PasswordHasher

    from reporting.settings import Settings

log = logging.getLogger(__name__)

MIN_PASSWORD_CHARS = 10
"""Shortest password accepted (common practice)."""
MAX_PASSWORD_CHARS = 1024
"""Longest password accepted: NIST SP 800-63B 5.1.1.2 asks for at least 64 and allows a limit; a
bound also keeps ``--password-stdin`` from reading without end (``< /dev/zero``)."""


class Role(Vocabulary):
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


_dummy_hashes: dict[int, str] = {}


def _dummy_hash() -> str:
    """A hash of a random password with the current hasher's cost, to verify unknown names against."""
    key = id(hasher())
    if key not in _dummy_hashes:
        import secrets

        _dummy_hashes[key] = hasher().hash(secrets.token_urlsafe(16))
    return _dummy_hashes[key]


def _lab_settings(settings: Settings | None) -> Settings:
    from reporting.settings import default_settings

    return settings or default_settings()


def _utc_now() -> dt.datetime:
    return dt.datetime.now(dt.UTC)


def lock_in_effect(user: User, moment: dt.datetime | None = None) -> bool:
    """Whether ``user`` is locked now (a time-limited lock that has run out is not)."""
    if not user.locked:
        return False
    if user.locked_until is None:
        return True
    return dt.datetime.fromisoformat(user.locked_until) > (moment or _utc_now())


def hash_password(password: str, where: str) -> str:
    check_new_password(password, where)
    return hasher().hash(password)


def check_new_password(password: str, where: str) -> None:
    if len(password) < MIN_PASSWORD_CHARS:
        raise StoreError(where, f"the password must have at least {MIN_PASSWORD_CHARS} characters")
    if len(password) > MAX_PASSWORD_CHARS:
        raise StoreError(where, f"the password must have at most {MAX_PASSWORD_CHARS:,} characters")
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
    db: Database,
    name: str,
    password: str,
    *,
    role: Role | None = None,
    origin: Origin,
    settings: Settings | None = None,
    failed_action: str = "auth_failed",
    address: str | None = None,
) -> Person:
    """The user ``name`` if ``password`` is theirs and the account is open; else :class:`AuthError`.

    A wrong password counts towards the lockout (``settings``: the lab's lockout settings) and is
    recorded as the audit event ``failed_action`` (committed even though the caller then fails);
    ``address`` is the network address of a web request, recorded with it. A lock whose time has
    run out is lifted here.
    """
    from argon2.exceptions import InvalidHashError, VerificationError

    lab = _lab_settings(settings)
    where = f"--as {name}"
    with db.read() as session:
        user = find(session, name)
        found = (
            None
            if user is None
            else (
                user.password_hash,
                lock_in_effect(user),
                user.locked,
                user.locked_until,
                person(user),
                user.failed_attempts,
            )
        )
    if found is None:
        _waste_time(password)
        _failure(db, name, "unknown user", origin, lab, failed_action, address, known=False)
        raise AuthError(where, "unknown user (or wrong password)")
    stored, locked, lock_ran_out, locked_until, who, failures = found
    if locked:
        _waste_time(password)
        _failure(db, name, "locked", origin, lab, failed_action, address, known=True, counts=False)
        until = "an admin must unlock it (`store user unlock`)"
        if locked_until is not None:
            until = "try again later, or ask an admin to unlock it (`store user unlock`)"
        raise AuthError(where, f"the account is locked; {until}")
    try:
        hasher().verify(stored, password)
    except (VerificationError, InvalidHashError):
        now_locked = _failure(
            db, name, "wrong password", origin, lab, failed_action, address, known=True, counts=True
        )
        suffix = "; the account is now locked" if now_locked else ""
        raise AuthError(where, f"wrong password{suffix}") from None
    if role is not None and role not in who.roles:
        raise AuthError(where, f"needs the {role.value} role to do this")
    rehash = hasher().check_needs_rehash(stored)
    if not (failures or lock_ran_out or rehash):
        return who  # nothing to record: no write transaction (it would take the append lock)
    with db.write() as session:
        user = find(session, name)
        assert user is not None
        if user.failed_attempts:
            user.failed_attempts = 0
        if lock_ran_out:  # a time-limited lock that has run out
            user.locked = False
            user.locked_until = None
        if rehash:
            user.password_hash = hasher().hash(password)
    return who


def _waste_time(password: str) -> None:
    """Verify against a dummy hash, so an unknown or locked name answers as slowly as a known one."""
    from argon2.exceptions import InvalidHashError, VerificationError

    with contextlib.suppress(VerificationError, InvalidHashError):
        hasher().verify(_dummy_hash(), password)


def _failure(
    db: Database,
    name: str,
    why: str,
    origin: Origin,
    lab: Settings,
    action: str,
    address: str | None,
    *,
    known: bool,
    counts: bool = False,
) -> bool:
    """Record a failed sign-in (``known``: the name is an account's, named in the event; ``counts``:
    towards its lockout); lock the account at the limit. True when it is now locked."""
    from reporting.store.sessions import EndReason, keyed_name, revoke_user

    with db.write() as session:
        locked = False
        until = ""
        detail: dict[str, str] = {"why": why}
        if known:
            detail["user"] = name
        if counts:
            user = find(session, name)
            assert user is not None
            if user.locked and not lock_in_effect(user):  # a lock that ran out: count afresh
                user.locked, user.locked_until, user.failed_attempts = False, None, 0
            user.failed_attempts += 1
            locked = user.failed_attempts >= lab.lockout_failures
            if locked:
                user.locked = True
                user.locked_until = (
                    None
                    if lab.lockout_minutes is None
                    else (_utc_now() + dt.timedelta(minutes=lab.lockout_minutes)).isoformat(
                        timespec="microseconds"
                    )
                )
                until = user.locked_until or "unlocked by an admin"
                revoke_user(session, name, EndReason.LOCKED)
        if address is not None:
            detail["address"] = address
        audit.append(
            session,
            action=action,
            actor=keyed_name(session, name),
            origin=origin,
            detail=detail,
        )
        if locked:
            audit.append(
                session,
                action="user_locked",
                actor=None,
                origin=origin,
                detail={"user": name, "until": until},
            )
    log.info("failed sign-in (%s)", why)
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
        user.locked, user.locked_until = False, None
        from reporting.store.sessions import EndReason, revoke_user

        revoke_user(session, name, EndReason.PASSWORD)
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
        user.locked_until = None
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
