"""Server-side sessions of the lab page (``segreport serve --db``), kept in the store.

A signed-in browser holds a random token (:func:`secrets.token_urlsafe`, 256 bits) in its cookie;
the store keeps only the token's SHA-256, so a copy of the database does not hand out live
sessions. A new token is made at every sign-in (never one the browser brought: session fixation)
and a session ends for good at sign-out, after :attr:`Settings.session_idle_minutes` without a
request (automatic logoff), :attr:`Settings.session_max_hours` after sign-in however active
(absolute timeout), at a password change or reset and when the account is locked — a
signed client-side cookie could not be revoked like this (OWASP Session Management Cheat Sheet:
session ID entropy, renewal after authentication, server-side expiration; HIPAA 45 CFR
164.312(a)(2)(iii) automatic logoff).

Each session has its own CSRF token, derived from the session token with a keyed HMAC (key
``csrf_hmac`` in ``store_keys``) so the page can fetch it again after a reload; the store keeps
its SHA-256 (OWASP CSRF Prevention Cheat Sheet: synchronizer token per session, HMAC-based
variant). ``last_seen_at`` is written at most every :data:`TOUCH_SECONDS` per session, so reads
need no write; a session may therefore end up to that much earlier than the setting says, never
later.

The same module keeps the store's random keys (``store_keys``) and hashes a typed user name with
one of them (:func:`keyed_name`): a failed sign-in's name goes into the audit trail only as that
hash, because people type passwords into the name field. Anyone who can read the database can
read the key too; the hash keeps typed text out of audit exports and logs, not away from a
database administrator.
"""

from __future__ import annotations

import base64
import datetime as dt
import hashlib
import hmac
import logging
import secrets
from collections.abc import Callable
from dataclasses import dataclass

from sqlalchemy import bindparam, select, update
from sqlalchemy.orm import Session

from reporting.store import audit
from reporting.store.canonical import Origin, sha256_hex
from reporting.store.engine import Database
from reporting.store.schema import StoreKey, User, WebSessionRow
from reporting.store.users import Person, person
from reporting.vocabulary import Vocabulary

log = logging.getLogger(__name__)

TOUCH_SECONDS = 30
"""A session's ``last_seen_at`` is rewritten at most this often (a write per request would be
wasted work; not a lab setting because it only trades precision of the idle time for writes)."""
AUDIT_NAME_KEY = "audit_name_hmac"
CSRF_KEY = "csrf_hmac"
ADDRESS_CHARS = 64

Clock = Callable[[], dt.datetime]


class EndReason(Vocabulary):
    """Why a session ended."""

    SIGNED_OUT = "signed_out"
    """The user signed out."""
    IDLE = "idle"
    """No request for longer than the idle timeout."""
    LIFETIME = "lifetime"
    """Signed in longer than the absolute timeout, however active."""
    REPLACED = "replaced"
    """The browser signed in again: its old session ends (a new token is issued)."""
    PASSWORD = "password"
    """The user's password was changed or reset: all their sessions end."""
    LOCKED = "locked"
    """The account was locked after repeated wrong passwords: all its sessions end."""


def utc_now() -> dt.datetime:
    return dt.datetime.now(dt.UTC)


def stamp(moment: dt.datetime) -> str:
    """UTC ISO 8601 text of fixed width, so stored times sort and compare as text."""
    return moment.astimezone(dt.UTC).isoformat(timespec="microseconds")


def parse(text: str) -> dt.datetime:
    return dt.datetime.fromisoformat(text)


def token_hash(token: str) -> str:
    return sha256_hex(token.encode())


# --- the store's keys ------------------------------------------------------------------------


def store_key(session: Session, name: str) -> bytes:
    """The store's random key ``name``, made (32 random bytes) on first use."""
    row = session.get(StoreKey, name)
    if row is None:
        row = StoreKey(name=name, key_hex=secrets.token_hex(32), created_at=stamp(utc_now()))
        session.add(row)
        session.flush()
    return bytes.fromhex(row.key_hex)


def keyed_name(session: Session, typed: str) -> str:
    """HMAC-SHA256 (hex) of a typed user name with the store's key: never the name itself."""
    return hmac.new(store_key(session, AUDIT_NAME_KEY), typed.encode(), hashlib.sha256).hexdigest()


def revoke_user(
    session: Session, name: str, reason: EndReason, *, now: dt.datetime | None = None
) -> int:
    """End every open session of user ``name`` (inside the caller's writing transaction)."""
    result = session.execute(
        update(WebSessionRow)
        .where(WebSessionRow.user_name == name, WebSessionRow.ended_at.is_(None))
        .values(ended_at=stamp(now or utc_now()), end_reason=reason.value)
    )
    count = int(getattr(result, "rowcount", 0) or 0)
    if count:
        log.info("ended %d session(s) of %s: %s", count, name, reason.value)
    return count


# --- sessions -------------------------------------------------------------------------------


_LIVE = (
    select(WebSessionRow, User)
    .join(User, User.name == WebSessionRow.user_name)
    .where(WebSessionRow.token_sha256 == bindparam("token"))
)
"""Built once: every request runs it, and building it costs more CPU than running it."""


@dataclass(frozen=True)
class Opened:
    """A new session: the cookie's token and the page's CSRF token (neither is stored)."""

    token: str
    csrf_token: str
    token_sha256: str


@dataclass(frozen=True)
class Live:
    """A session in use: who holds it, and its CSRF token's hash."""

    token_sha256: str
    person: Person
    csrf_sha256: str
    address: str


@dataclass(frozen=True)
class Refused:
    """No usable session: why (for the 401's message)."""

    why: str


class WebSessions:
    """The sessions of one store, with the lab's idle and absolute timeouts (``clock`` is for
    tests)."""

    def __init__(
        self, db: Database, *, idle_minutes: int, max_hours: int, clock: Clock = utc_now
    ) -> None:
        self.db = db
        self.idle = dt.timedelta(minutes=idle_minutes)
        self.lifetime = dt.timedelta(hours=max_hours)
        self.clock = clock
        self._csrf_key: bytes | None = None

    def csrf_key(self) -> bytes:
        if self._csrf_key is None:
            with self.db.write() as session:
                self._csrf_key = store_key(session, CSRF_KEY)
        return self._csrf_key

    def csrf_token(self, token: str) -> str:
        """The CSRF token of the session whose cookie holds ``token``."""
        digest = hmac.new(self.csrf_key(), token.encode(), hashlib.sha256).digest()
        return base64.urlsafe_b64encode(digest).decode().rstrip("=")

    def csrf_ok(self, live: Live, sent: str | None) -> bool:
        """Whether ``sent`` (the ``X-CSRF-Token`` header) is this session's CSRF token."""
        return bool(sent) and hmac.compare_digest(token_hash(sent or ""), live.csrf_sha256)

    def open(self, who: Person, address: str, *, replaces: str | None = None) -> Opened:
        """A new session for ``who`` (signed in just now), audited as ``sign_in``.

        ``replaces`` is the token of a session the browser still held: it ends (``replaced``).
        """
        token = secrets.token_urlsafe(32)
        csrf = self.csrf_token(token)
        moment = stamp(self.clock())
        hashed = token_hash(token)
        with self.db.write() as session:
            if replaces is not None:
                session.execute(
                    update(WebSessionRow)
                    .where(
                        WebSessionRow.token_sha256 == token_hash(replaces),
                        WebSessionRow.ended_at.is_(None),
                    )
                    .values(ended_at=moment, end_reason=EndReason.REPLACED.value)
                )
            session.add(
                WebSessionRow(
                    token_sha256=hashed,
                    user_name=who.name,
                    csrf_sha256=token_hash(csrf),
                    created_at=moment,
                    last_seen_at=moment,
                    address=address[:ADDRESS_CHARS],
                )
            )
            audit.append(
                session,
                action="sign_in",
                actor=who.name,
                origin=Origin.WEB,
                detail={"address": address[:ADDRESS_CHARS], "session": hashed[:16]},
            )
        return Opened(token=token, csrf_token=csrf, token_sha256=hashed)

    def check(self, token: str | None, address: str) -> Live | Refused:
        """The live session of ``token``; an idle one, or one signed in longer than the absolute
        timeout, ends here (audited ``session_expired``), and an ended one used again is refused
        and audited (``session_refused``)."""
        if not token:
            return Refused("sign in first")
        hashed = token_hash(token)
        moment = self.clock()
        with self.db.read() as session:
            found = session.execute(_LIVE, {"token": hashed}).first()
            if found is None:
                return Refused("sign in first")
            row, user = found
            ended, reason, last_seen = row.ended_at, row.end_reason, parse(row.last_seen_at)
            created = parse(row.created_at)
            live = Live(
                token_sha256=hashed,
                person=person(user),
                csrf_sha256=row.csrf_sha256,
                address=row.address,
            )
        if ended is not None:
            self._audit_refused(live, reason or "", address)
            return Refused("this session has ended; sign in again")
        if moment - last_seen > self.idle:
            minutes = int(self.idle.total_seconds() // 60)
            self._expire(live, address, moment, EndReason.IDLE, {"idle_minutes": minutes})
            return Refused(f"signed out after {minutes} minutes without activity; sign in again")
        if moment - created > self.lifetime:
            hours = int(self.lifetime.total_seconds() // 3600)
            self._expire(live, address, moment, EndReason.LIFETIME, {"max_hours": hours})
            return Refused(f"signed out {hours} hours after signing in; sign in again")
        if (moment - last_seen).total_seconds() >= TOUCH_SECONDS:
            with self.db.write() as session:
                session.execute(
                    update(WebSessionRow)
                    .where(WebSessionRow.token_sha256 == hashed, WebSessionRow.ended_at.is_(None))
                    .values(last_seen_at=stamp(moment))
                )
        return live

    def end(self, token_sha256: str, user: str, address: str) -> None:
        """End the session whose token hashes to ``token_sha256`` (sign-out), audited ``sign_out``."""
        with self.db.write() as session:
            session.execute(
                update(WebSessionRow)
                .where(WebSessionRow.token_sha256 == token_sha256)
                .values(ended_at=stamp(self.clock()), end_reason=EndReason.SIGNED_OUT.value)
            )
            audit.append(
                session,
                action="sign_out",
                actor=user,
                origin=Origin.WEB,
                detail={"address": address, "session": token_sha256[:16]},
            )

    def _expire(
        self,
        live: Live,
        address: str,
        moment: dt.datetime,
        why: EndReason,
        limit: dict[str, int],
    ) -> None:
        with self.db.write() as session:
            result = session.execute(
                update(WebSessionRow)
                .where(
                    WebSessionRow.token_sha256 == live.token_sha256,
                    WebSessionRow.ended_at.is_(None),
                )
                .values(ended_at=stamp(moment), end_reason=why.value)
            )
            if getattr(result, "rowcount", 0):
                audit.append(
                    session,
                    action="session_expired",
                    actor=live.person.name,
                    origin=Origin.WEB,
                    detail={"address": address, "session": live.token_sha256[:16], **limit},
                )

    def _audit_refused(self, live: Live, reason: str, address: str) -> None:
        """An ended session's cookie came back (a copied cookie, or a stale tab): audited."""
        log.warning("ended session of %s used again from %s", live.person.name, address)
        with self.db.write() as session:
            audit.append(
                session,
                action="session_refused",
                actor=live.person.name,
                origin=Origin.WEB,
                detail={"address": address, "session": live.token_sha256[:16], "ended": reason},
            )
