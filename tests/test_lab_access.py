"""Who may call what in lab mode: every route of the app is in the one access table, every /api
route answers 401 without a session (sign-in excepted), and the role × route matrix generated
from that table holds for the routes present (deny by default: OWASP Authorization Cheat Sheet;
21 CFR 11.10(d), (g)). The folder mode's request guards hold in lab mode too. The admin routes'
answers are read back (users, settings, the audit trail page by page).
"""

from __future__ import annotations

import re
from typing import Any

import pytest
from lab_support import ROLE_USERS, lab_client, lab_store, sign_in
from sqlalchemy import select
from starlette.routing import Mount
from store_support import PASSWORD, cheap_argon2, pg_socket, store_url

from reporting.settings import default_settings
from reporting.store.audit import body_of
from reporting.store.engine import Database
from reporting.store.schema import EventRow
from reporting.web.lab import ACCESS
from reporting.web.lab.access import PUBLIC

__all__ = ["cheap_argon2", "pg_socket", "store_url"]  # fixtures used by name

SAMPLE_PARAMS = {"study_id": "DEMO-0001", "name": "rita", "number": "1"}


@pytest.fixture
def db(store_url: str) -> Database:
    return lab_store(store_url)


@pytest.fixture(scope="module")
def sqlite_db(tmp_path_factory: pytest.TempPathFactory) -> Database:
    return lab_store(str(tmp_path_factory.mktemp("lab") / "store.db"))


def app_routes(client: Any) -> list[tuple[str, str]]:
    """(method, path) of every route of the app, HEAD and OPTIONS aside."""
    found = []
    for route in client.app.routes:
        if isinstance(route, Mount):
            found.append(("GET", route.path))
            continue
        for method in sorted(getattr(route, "methods", None) or ()):
            if method not in ("HEAD", "OPTIONS"):
                found.append((method, route.path))
    return found


def concrete(path: str) -> str:
    return re.sub(r"\{(\w+)\}", lambda m: SAMPLE_PARAMS.get(m.group(1), "x"), path)


def test_every_route_of_the_app_is_in_the_access_table(sqlite_db: Database) -> None:
    routes = app_routes(lab_client(sqlite_db))
    assert ("POST", "/api/session") in routes  # the walk sees the included routers' routes
    missing = [r for r in routes if r not in ACCESS]
    assert missing == []
    public = sorted(k for k, v in ACCESS.items() if v is PUBLIC)
    assert public == [("GET", "/"), ("GET", "/static"), ("POST", "/api/session")]


def test_every_api_route_needs_a_session_except_sign_in(sqlite_db: Database) -> None:
    client = lab_client(sqlite_db)
    api = [(m, p) for m, p in app_routes(client) if p.startswith("/api")]
    assert len(api) >= 8
    answers = {
        (m, p): client.request(m, concrete(p), json={}).status_code
        for m, p in api
        if (m, p) != ("POST", "/api/session")
    }
    assert answers and set(answers.values()) == {401}, answers
    # an /api path that no route answers: 401 too (no listing of routes for strangers)
    assert client.get("/api/no-such-thing").status_code == 401


def test_unauthenticated_malformed_body_is_401_not_422(sqlite_db: Database) -> None:
    client = lab_client(sqlite_db)
    answer = client.post(
        "/api/users", content=b"{not json", headers={"content-type": "application/json"}
    )
    assert answer.status_code == 401


def _matrix() -> list[Any]:
    cases = []
    for (method, path), roles in sorted(ACCESS.items()):
        if roles is PUBLIC or not path.startswith("/api") or path == "/api/session":
            continue  # sign-out and who-am-I are open to every role (tested in test_lab_auth)
        for role in sorted(ROLE_USERS):
            allowed = any(r.value == role for r in roles)
            cases.append(pytest.param(method, path, role, allowed, id=f"{method}-{path}-{role}"))
    return cases


@pytest.mark.parametrize(("method", "path", "role", "allowed"), _matrix())
def test_role_route_matrix_from_the_access_table(
    sqlite_db: Database, method: str, path: str, role: str, allowed: bool
) -> None:
    client = lab_client(sqlite_db)
    present = (method, path) in app_routes(client)
    if not present:
        pytest.skip(f"{method} {path} is not served by this build yet")  # another router's route
    sign_in(client, ROLE_USERS[role])
    answer = client.request(method, concrete(path), json={})
    if allowed:
        assert answer.status_code not in (401, 403), answer.text
    else:
        assert answer.status_code == 403
        assert answer.json()["detail"].endswith(
            "needs the role " + " or ".join(sorted(r.value for r in ACCESS[(method, path)] or ()))
        )
        with sqlite_db.read() as session:
            last = body_of(session.scalars(select(EventRow).order_by(EventRow.seq.desc())).first())  # type: ignore[arg-type]
        assert last["action"] == "forbidden" and last["actor"] == ROLE_USERS[role]
        assert last["detail"]["path"] == path


def test_a_route_missing_from_the_table_is_refused_even_to_an_admin(sqlite_db: Database) -> None:
    client = lab_client(sqlite_db)
    client.app.add_api_route("/api/forgotten", lambda: {"secret": 1}, methods=["GET"])
    sign_in(client, "alice")  # admin and reader
    answer = client.get("/api/forgotten")
    assert answer.status_code == 403 and "not in the access table" in answer.json()["detail"]


@pytest.mark.parametrize(
    ("headers", "content", "status"),
    [
        ({"host": "evil.example"}, None, 421),  # bad: DNS rebinding, a foreign Host name
        ({"origin": "http://evil.example"}, None, 403),  # bad: another site's page
        ({"content-type": "text/plain"}, b"{}", 415),  # bad: a form-like body a site can send
        ({}, b"x" * (256 * 1024 + 1), 413),  # bad: body above the cap
    ],
    ids=["foreign-host", "cross-site", "not-json", "too-large"],
)
def test_folder_mode_guards_hold_in_lab_mode(
    sqlite_db: Database, headers: dict[str, str], content: bytes | None, status: int
) -> None:
    client = lab_client(sqlite_db)
    answer = client.post("/api/session", headers=headers, content=content)
    assert answer.status_code == status
    assert answer.json()["detail"]  # a plain reason, as in folder mode


def test_security_headers_on_lab_pages(sqlite_db: Database) -> None:
    page = lab_client(sqlite_db).get("/")
    assert page.status_code == 200
    assert "script-src 'self'" in page.headers["content-security-policy"]
    assert page.headers["cache-control"] == "no-store"
    assert "strict-transport-security" not in page.headers  # plain http on loopback


def test_allowed_host_names_are_answered(sqlite_db: Database) -> None:
    client = lab_client(sqlite_db, allowed_hosts=("127.0.0.1", "echo-lab.internal"))
    assert client.get("/", headers={"host": "echo-lab.internal"}).status_code == 200
    assert client.get("/", headers={"host": "other.internal"}).status_code == 421


# --- the admin routes' answers ---------------------------------------------------------------


def test_admin_lists_and_adds_users_and_refuses_bad_ones(db: Database) -> None:
    admin = lab_client(db)
    sign_in(admin, "ada")
    names = [u["name"] for u in admin.get("/api/users").json()]
    assert names == sorted(["alice", *ROLE_USERS.values()])
    assert "password_hash" not in repr(admin.get("/api/users").json())
    body = {"name": "rita", "full_name": "X", "roles": ["reader"], "password": "long enough 1"}
    duplicate = admin.post("/api/users", json=body)  # bad: the name is taken
    assert duplicate.status_code == 422 and "already exists" in duplicate.text
    short = admin.post("/api/users", json=body | {"name": "kim", "password": "short"})
    assert short.status_code == 422 and "at least 10 characters" in short.text  # bad: too short
    odd = admin.post("/api/users", json=body | {"name": "../kim"})  # bad: not a plain name
    assert odd.status_code == 422
    unknown = admin.post("/api/users/nobody/unlock")
    assert unknown.status_code == 422 and "unknown user" in unknown.text


def test_admin_reads_the_settings_in_effect_with_sources(db: Database) -> None:
    lab = default_settings().model_copy(update={"session_idle_minutes": 10})
    admin = lab_client(db, settings=lab)
    sign_in(admin, "ada")
    shown = admin.get("/api/settings").json()
    assert set(shown) == set(type(lab).model_fields)
    assert shown["session_idle_minutes"]["value"] == 10
    assert shown["session_idle_minutes"]["source"].startswith(
        "Lab setting session_idle_minutes = 10"
    )
    assert "164.312" in shown["session_idle_minutes"]["source"]
    assert shown["lockout_failures"] == {"value": 5, "source": lab.cited("lockout_failures")}


def test_admin_pages_through_the_whole_audit_trail(db: Database) -> None:
    admin = lab_client(db)
    sign_in(admin, "ada")
    seen: list[dict[str, Any]] = []
    after = 0
    while True:
        page = admin.get(f"/api/audit?after={after}&limit=4").json()
        seen.extend(page["events"])
        if page["next_after"] is None:
            break
        after = page["next_after"]
    with db.read() as session:
        stored = [(r.seq, r.hash) for r in session.scalars(select(EventRow).order_by(EventRow.seq))]
    assert [(e["seq"], e["hash"]) for e in seen] == stored
    assert seen[-1]["action"] == "sign_in" and seen[-1]["actor"] == "ada"
    assert admin.get("/api/audit?limit=0").status_code == 422  # bad: an empty page
    assert admin.get("/api/audit?limit=100000").status_code == 422  # bad: above the page cap


def test_sonographer_cannot_reach_admin_routes_and_is_audited(db: Database) -> None:
    client = lab_client(db)
    sign_in(client, "sam", PASSWORD)
    assert client.get("/api/audit").status_code == 403
    with db.read() as session:
        last = body_of(session.scalars(select(EventRow).order_by(EventRow.seq.desc())).first())  # type: ignore[arg-type]
    assert (last["action"], last["actor"], last["detail"]["path"]) == (
        "forbidden",
        "sam",
        "/api/audit",
    )
