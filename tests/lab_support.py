"""Lab-mode (``serve --db``) test support: a store with one user per role, the lab app over it,
and signing in through the real route (the client then carries the session cookie and sends the
session's CSRF token with every request).

Users: ``alice`` (admin and reader, the store's first user), ``rita`` (reader), ``sam``
(sonographer), ``ada`` (admin only); every password is :data:`PASSWORD`, none temporary.
"""

from __future__ import annotations

from typing import Any

from store_support import PASSWORD

from reporting.settings import Settings, default_settings
from reporting.store import service, users
from reporting.store.canonical import Origin
from reporting.store.engine import Database

ROLE_USERS = {"reader": "rita", "sonographer": "sam", "admin": "ada"}
"""One user holding only that role, by role."""
BASE_URL = "http://127.0.0.1"


def lab_store(url: str) -> Database:
    """A new store at ``url`` with the users above."""
    db = service.init_store(
        url, "alice", full_name="Dr Alice Example", password=PASSWORD, origin=Origin.CLI
    )
    for role, name in ROLE_USERS.items():
        users.add(
            db,
            name,
            full_name=f"{name.title()} Example",
            roles=[users.Role(role)],
            password=PASSWORD,
            actor="alice",
            origin=Origin.CLI,
        )
        users.set_password(db, name, PASSWORD, temporary=False, actor=name, origin=Origin.CLI)
    return db


def lab_client(
    db: Database, settings: Settings | None = None, base_url: str = BASE_URL, **options: Any
) -> Any:
    """A test client of the lab app over ``db`` (``options`` go to ``create_lab_app``)."""
    from fastapi.testclient import TestClient

    from reporting.web.lab import create_lab_app

    app = create_lab_app(db, settings=settings or default_settings(), **options)
    return TestClient(app, base_url=base_url)


def sign_in(client: Any, name: str, password: str = PASSWORD) -> dict[str, Any]:
    """Sign ``client`` in as ``name``; its later requests carry the session's CSRF token."""
    answer = client.post("/api/session", json={"user": name, "password": password})
    assert answer.status_code == 200, answer.text
    info: dict[str, Any] = answer.json()
    client.headers["x-csrf-token"] = info["csrf_token"]
    return info
