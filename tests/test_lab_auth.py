"""Signing in to the lab page (``serve --db``), on SQLite and PostgreSQL: cookie flags, idle
timeout, lockout, throttling, session fixation, revocation, CSRF and the audit trail.

References: OWASP Session Management Cheat Sheet (token entropy, renewal at sign-in, server-side
expiry, cookie attributes); RFC 6265bis (HttpOnly, SameSite, Secure, the ``__Host-`` prefix);
NIST SP 800-63B 5.2.2 (limiting failed attempts); 21 CFR 11.300(d) (safeguards against
unauthorised use of passwords, reported to management: the audit trail); HIPAA 45 CFR
164.312(a)(2)(iii) (automatic logoff); OWASP CSRF Prevention Cheat Sheet (a token per session).
"""

from __future__ import annotations

import asyncio
import datetime as dt
import hashlib
import hmac
from http.cookies import SimpleCookie
from typing import Any

import pytest
from lab_support import lab_client, lab_store, sign_in
from sqlalchemy import select, update
from store_support import PASSWORD, cheap_argon2, pg_socket, store_url

from reporting.settings import default_settings
from reporting.store import users
from reporting.store.audit import body_of
from reporting.store.engine import Database
from reporting.store.schema import EventRow, StoreKey, User, WebSessionRow

__all__ = ["cheap_argon2", "pg_socket", "store_url"]  # fixtures used by name

COOKIE = "segreport_session"


@pytest.fixture
def db(store_url: str) -> Database:
    return lab_store(store_url)


def events(db: Database, action: str | None = None) -> list[dict[str, Any]]:
    with db.read() as session:
        rows = session.scalars(select(EventRow).order_by(EventRow.seq)).all()
        found = [body_of(r) for r in rows]
    return [e for e in found if action is None or e["action"] == action]


def set_cookie(answer: Any) -> SimpleCookie:
    cookie: SimpleCookie = SimpleCookie()
    cookie.load(answer.headers["set-cookie"])
    return cookie


def session_rows(db: Database, user: str) -> list[WebSessionRow]:
    with db.read() as session:
        return list(
            session.scalars(
                select(WebSessionRow)
                .where(WebSessionRow.user_name == user)
                .order_by(WebSessionRow.created_at)
            )
        )


# --- signing in and out ---------------------------------------------------------------------


def test_sign_in_sets_a_strict_httponly_cookie_and_stores_only_its_hash(db: Database) -> None:
    client = lab_client(db)
    answer = client.post("/api/session", json={"user": "rita", "password": PASSWORD})
    assert answer.status_code == 200
    info = answer.json()
    assert info["user"] == "rita" and info["roles"] == ["reader"]
    assert info["idle_timeout_seconds"] == 15 * 60 and info["must_change_password"] is False
    morsel = set_cookie(answer)[COOKIE]
    # RFC 6265bis: HttpOnly (no script reads it), SameSite=Strict, Path=/; plain http: not Secure
    assert morsel["httponly"] and morsel["samesite"].lower() == "strict" and morsel["path"] == "/"
    assert not morsel["secure"]
    assert not morsel["expires"] and not morsel["max-age"]  # a browser-session cookie
    token = morsel.value
    assert len(token) >= 43  # 32 random bytes, URL-safe base64 (OWASP: >= 64 bits of entropy)
    (row,) = session_rows(db, "rita")
    assert row.token_sha256 == hashlib.sha256(token.encode()).hexdigest()
    assert token not in repr(row.__dict__)  # the token itself is never stored
    assert row.csrf_sha256 == hashlib.sha256(info["csrf_token"].encode()).hexdigest()
    assert client.get("/api/session").json()["csrf_token"] == info["csrf_token"]  # after a reload


@pytest.mark.parametrize(
    ("secure_cookies", "base_url", "cookie_name", "secure"),
    [
        (True, "https://127.0.0.1", "__Host-segreport_session", True),  # uvicorn's own TLS
        (None, "https://127.0.0.1", "__Host-segreport_session", True),  # proxy said https
        (None, "http://127.0.0.1", COOKIE, False),  # proxy said http
    ],
    ids=["tls", "proxy-https", "proxy-http"],
)
def test_cookie_is_secure_with_host_prefix_under_tls(
    db: Database, secure_cookies: bool | None, base_url: str, cookie_name: str, secure: bool
) -> None:
    client = lab_client(db, base_url=base_url, secure_cookies=secure_cookies)
    answer = client.post("/api/session", json={"user": "rita", "password": PASSWORD})
    morsel = set_cookie(answer)[cookie_name]
    assert bool(morsel["secure"]) is secure
    assert client.get("/api/session").status_code == 200  # the browser sends it back
    if secure_cookies:  # RFC 6797: the page is https only from now on
        assert "max-age=" in answer.headers["strict-transport-security"]


def test_sign_out_ends_the_session_and_a_copied_cookie_is_refused_and_audited(
    db: Database,
) -> None:
    client = lab_client(db)
    sign_in(client, "rita")
    stolen = client.cookies[COOKIE]
    assert client.delete("/api/session").status_code == 204
    assert client.get("/api/session").status_code == 401
    thief = lab_client(db)
    thief.cookies.set(COOKIE, stolen, domain="127.0.0.1")  # bad: the cookie of a signed-out session
    refused = thief.get("/api/users")
    assert refused.status_code == 401 and "ended" in refused.json()["detail"]
    (row,) = session_rows(db, "rita")
    assert row.ended_at is not None and row.end_reason == "signed_out"
    assert [e["actor"] for e in events(db, "sign_out")] == ["rita"]
    assert events(db, "session_refused")[-1]["detail"]["ended"] == "signed_out"


def test_a_cookie_sent_before_sign_in_is_never_reused(db: Database) -> None:
    client = lab_client(db)
    client.cookies.set(
        COOKIE, "chosen-by-an-attacker-0123456789", domain="127.0.0.1"
    )  # bad: a planted session id
    sign_in(client, "rita")
    assert client.cookies[COOKIE] != "chosen-by-an-attacker-0123456789"
    first = client.cookies[COOKIE]
    sign_in(client, "rita")  # signing in again from the same browser: a new id, the old one ends
    second = client.cookies[COOKIE]
    assert second != first
    old = lab_client(db)
    old.cookies.set(COOKIE, first, domain="127.0.0.1")
    assert old.get("/api/session").status_code == 401
    rows = session_rows(db, "rita")
    assert [r.end_reason for r in rows] == ["replaced", None]


@pytest.mark.parametrize(
    ("name", "password"),
    [
        ("rita", "not her password"),  # bad: wrong password
        ("nobody", PASSWORD),  # bad: no such user
        ("correct horse battery", "x"),  # bad: a password typed into the name field
    ],
    ids=["wrong-password", "unknown-user", "password-as-name"],
)
def test_failed_sign_in_is_one_answer_and_audits_only_a_keyed_hash_of_the_name(
    db: Database, name: str, password: str
) -> None:
    client = lab_client(db)
    answer = client.post("/api/session", json={"user": name, "password": password})
    reference = lab_client(db).post("/api/session", json={"user": "rita", "password": "no no no"})
    assert answer.status_code == 401 and answer.json() == reference.json()
    assert "set-cookie" not in answer.headers
    failed = events(db, "sign_in_failed")[0]
    with db.read() as session:
        key = bytes.fromhex(session.get(StoreKey, "audit_name_hmac").key_hex)  # type: ignore[union-attr]
    assert failed["actor"] == hmac.new(key, name.encode(), hashlib.sha256).hexdigest()
    everything = repr(events(db))
    if name != "rita":  # an unknown name (maybe a password) is nowhere in the trail
        assert name not in everything
    assert PASSWORD not in everything or name == "rita"


def test_the_name_hash_key_is_random_per_store(store_url: str, tmp_path: Any) -> None:
    first, second = lab_store(store_url), lab_store(str(tmp_path / "other.db"))
    for db in (first, second):
        lab_client(db).post("/api/session", json={"user": "who", "password": "x"})
    assert (
        events(first, "sign_in_failed")[0]["actor"] != events(second, "sign_in_failed")[0]["actor"]
    )


def test_argon2_runs_off_the_event_loop(db: Database, monkeypatch: pytest.MonkeyPatch) -> None:
    cheap = users.hasher()
    seen: list[bool] = []

    class Watching:
        def verify(self, stored: str, password: str) -> bool:
            try:
                asyncio.get_running_loop()
                seen.append(True)  # bad: hashing on the loop blocks every other request
            except RuntimeError:
                seen.append(False)
            return cheap.verify(stored, password)

        def __getattr__(self, name: str) -> Any:
            return getattr(cheap, name)

    monkeypatch.setattr(users, "hasher", lambda: Watching())
    sign_in(lab_client(db), "rita")
    assert seen == [False]


# --- idle timeout ---------------------------------------------------------------------------


def test_idle_session_ends_after_the_lab_setting_and_is_audited(db: Database) -> None:
    lab = default_settings().model_copy(update={"session_idle_minutes": 20})
    client = lab_client(db, settings=lab)
    assert sign_in(client, "rita")["idle_timeout_seconds"] == 20 * 60
    assert client.get("/api/session").status_code == 200
    with db.write() as session:  # 21 minutes without a request (no sleeping)
        past = dt.datetime.now(dt.UTC) - dt.timedelta(minutes=21)
        session.execute(update(WebSessionRow).values(last_seen_at=past.isoformat()))
    answer = client.get("/api/session")
    assert answer.status_code == 401
    assert answer.json()["detail"] == "signed out after 20 minutes without activity; sign in again"
    (row,) = session_rows(db, "rita")
    assert row.end_reason == "idle"
    assert events(db, "session_expired")[0]["detail"]["idle_minutes"] == 20


def test_a_session_ends_at_the_absolute_timeout_however_active(db: Database) -> None:
    # OWASP Session Management Cheat Sheet: an absolute timeout bounds a session whatever the
    # activity (a stolen or forgotten session cannot live on by being used)
    start = dt.datetime(2026, 12, 2, 7, 0, tzinfo=dt.UTC)
    now = [start]
    lab = default_settings().model_copy(update={"session_max_hours": 3})
    client = lab_client(db, settings=lab, clock=lambda: now[0])
    sign_in(client, "rita")
    for minutes in range(10, 3 * 60, 10):  # busy all along: never idle
        now[0] = start + dt.timedelta(minutes=minutes)
        assert client.get("/api/session").status_code == 200
    now[0] = start + dt.timedelta(hours=3, minutes=1)
    answer = client.get("/api/session")
    assert answer.status_code == 401
    assert answer.json()["detail"] == "signed out 3 hours after signing in; sign in again"
    (row,) = session_rows(db, "rita")
    assert row.end_reason == "lifetime"
    assert events(db, "session_expired")[0]["detail"]["max_hours"] == 3
    sign_in(client, "rita")  # signing in again gives a new session
    assert client.get("/api/session").status_code == 200


def test_activity_keeps_a_session_alive_and_last_seen_is_written_sparingly(db: Database) -> None:
    start = dt.datetime(2026, 12, 2, 9, 0, tzinfo=dt.UTC)
    now = [start]
    client = lab_client(db, clock=lambda: now[0])
    sign_in(client, "rita")
    now[0] = start + dt.timedelta(seconds=10)
    client.get("/api/session")
    assert session_rows(db, "rita")[0].last_seen_at == start.isoformat(timespec="microseconds")
    for minutes in (10, 20, 30):  # a request every 10 minutes: never idle for 15
        now[0] = start + dt.timedelta(minutes=minutes)
        assert client.get("/api/session").status_code == 200
    assert session_rows(db, "rita")[0].last_seen_at == now[0].isoformat(timespec="microseconds")
    now[0] += dt.timedelta(minutes=15, seconds=1)
    assert client.get("/api/session").status_code == 401


# --- lockout and throttling -----------------------------------------------------------------


def test_lockout_ends_sessions_expires_and_an_admin_can_unlock(db: Database) -> None:
    lab = default_settings().model_copy(update={"lockout_failures": 3, "lockout_minutes": 15})
    open_tab = lab_client(db, settings=lab)
    sign_in(open_tab, "rita")
    guesser = lab_client(db, settings=lab)
    for _ in range(3):
        assert (
            guesser.post("/api/session", json={"user": "rita", "password": "guess"}).status_code
            == 401
        )
    locked = guesser.post("/api/session", json={"user": "rita", "password": PASSWORD})
    assert locked.status_code == 401  # bad: right password, but locked; same answer as wrong
    assert open_tab.get("/api/session").status_code == 401  # locking ended her session
    assert session_rows(db, "rita")[0].end_reason == "locked"
    assert events(db, "user_locked")[0]["detail"]["user"] == "rita"
    assert events(db, "sign_in_failed")[-1]["detail"]["why"] == "locked"
    admin = lab_client(db, settings=lab)
    sign_in(admin, "ada")
    listed = {u["name"]: u for u in admin.get("/api/users").json()}
    assert listed["rita"]["locked"] and listed["rita"]["locked_until"]
    assert admin.post("/api/users/rita/unlock").json()["locked"] is False
    sign_in(lab_client(db, settings=lab), "rita")
    assert events(db, "user_unlock")[0]["actor"] == "ada"


def test_lockout_runs_out_after_lockout_minutes(db: Database) -> None:
    lab = default_settings().model_copy(update={"lockout_failures": 2, "lockout_minutes": 15})
    client = lab_client(db, settings=lab)
    for _ in range(2):
        client.post("/api/session", json={"user": "rita", "password": "guess"})
    assert (
        client.post("/api/session", json={"user": "rita", "password": PASSWORD}).status_code == 401
    )
    with db.write() as session:  # the 15 minutes have passed
        past = dt.datetime.now(dt.UTC) - dt.timedelta(seconds=1)
        session.execute(
            update(User).where(User.name == "rita").values(locked_until=past.isoformat())
        )
    sign_in(client, "rita")


def test_sign_in_and_signing_failures_count_towards_one_lockout(db: Database) -> None:
    from reporting.store.canonical import Origin
    from reporting.store.errors import AuthError

    lab = default_settings().model_copy(update={"lockout_failures": 2})
    client = lab_client(db, settings=lab)
    client.post("/api/session", json={"user": "rita", "password": "guess"})
    with pytest.raises(AuthError, match="now locked"):  # the password re-entered to sign
        users.authenticate(db, "rita", "guess again", origin=Origin.WEB, settings=lab)
    assert (
        client.post("/api/session", json={"user": "rita", "password": PASSWORD}).status_code == 401
    )


def test_failures_from_one_address_are_throttled_with_retry_after(db: Database) -> None:
    lab = default_settings().model_copy(
        update={"sign_in_throttle_failures": 3, "sign_in_throttle_minutes": 10}
    )
    clock = [1000.0]
    client = lab_client(db, settings=lab, monotonic=lambda: clock[0])
    for name in ("x1", "x2", "x3"):  # guessing across names: no one account locks
        assert client.post("/api/session", json={"user": name, "password": "p"}).status_code == 401
    clock[0] += 60
    throttled = client.post("/api/session", json={"user": "rita", "password": PASSWORD})
    assert throttled.status_code == 429  # even the right password waits
    assert throttled.headers["retry-after"] == str(10 * 60 - 60)
    clock[0] += 10 * 60 - 60
    sign_in(client, "rita")


# --- CSRF and password change ---------------------------------------------------------------


@pytest.mark.parametrize(
    "token",
    [None, "other-session", "made-up"],
    ids=["missing", "other-session", "made-up"],  # bad: each is not this session's token
)
def test_a_write_without_this_sessions_csrf_token_is_refused_and_audited(
    db: Database, token: str | None
) -> None:
    mine, other = lab_client(db), lab_client(db)
    sign_in(mine, "ada")
    theirs = sign_in(other, "alice")["csrf_token"]
    sent = {None: None, "other-session": theirs, "made-up": "x" * 43}[token]
    mine.headers.pop("x-csrf-token")
    if sent is not None:
        mine.headers["x-csrf-token"] = sent
    answer = mine.post("/api/users/rita/unlock")
    assert answer.status_code == 403 and "CSRF" in answer.json()["detail"]
    refused = events(db, "csrf_refused")
    assert (
        refused[-1]["actor"] == "ada"
        and refused[-1]["detail"]["path"] == "/api/users/{name}/unlock"
    )
    assert not events(db, "user_unlock")  # nothing done


def test_password_change_ends_every_session_of_the_user(db: Database) -> None:
    first, second = lab_client(db), lab_client(db)
    sign_in(first, "rita")
    sign_in(second, "rita")
    wrong = first.put("/api/session/password", json={"old": "not it", "new": "a new password 1"})
    assert wrong.status_code == 403  # bad: the current password is wrong
    with db.read() as session:
        assert users.find(session, "rita").failed_attempts == 1  # type: ignore[union-attr]
    changed = first.put("/api/session/password", json={"old": PASSWORD, "new": "a new password 1"})
    assert changed.status_code == 204
    assert first.get("/api/session").status_code == 401
    assert second.get("/api/session").status_code == 401
    assert {r.end_reason for r in session_rows(db, "rita")} == {"password"}
    sign_in(lab_client(db), "rita", "a new password 1")
    assert events(db, "password_change")[-1]["origin"] == "web"


def test_a_temporary_password_must_be_changed_first(db: Database) -> None:
    admin = lab_client(db)
    sign_in(admin, "ada")
    added = admin.post(
        "/api/users",
        json={
            "name": "nora",
            "full_name": "Nora Example",
            "roles": ["sonographer"],
            "password": "temporary pass 1",
        },
    )
    assert added.status_code == 201 and added.json()["must_change_password"]
    nora = lab_client(db)
    assert sign_in(nora, "nora", "temporary pass 1")["must_change_password"] is True
    blocked = nora.get("/openapi.json")
    assert blocked.status_code == 403 and "temporary password" in blocked.json()["detail"]
    nora.put("/api/session/password", json={"old": "temporary pass 1", "new": "her own pass 1"})
    assert sign_in(nora, "nora", "her own pass 1")["must_change_password"] is False
    assert nora.get("/openapi.json").status_code == 200


def test_every_sign_in_and_failure_is_in_the_verified_audit_trail(db: Database) -> None:
    from reporting.store.verify import verify

    client = lab_client(db)
    client.post("/api/session", json={"user": "rita", "password": "guess"})
    sign_in(client, "rita")
    client.delete("/api/session")
    web = [e["action"] for e in events(db) if e["origin"] == "web"]
    assert web == ["sign_in_failed", "sign_in", "sign_out"]
    assert events(db, "sign_in")[0]["detail"]["address"] == "testclient"
    assert verify(db).events == len(events(db))  # the hash chain holds
