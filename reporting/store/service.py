"""The store's operations by name, as the command line (and the web page) call them.

Every operation except :func:`init_store` opens an existing, current store; every operation that
changes anything first authenticates its actor.
"""

from __future__ import annotations

import logging

from sqlalchemy import inspect

from reporting.settings import Settings
from reporting.store import audit, migrate
from reporting.store.canonical import Origin
from reporting.store.engine import Database, resolve_url, sqlite_file
from reporting.store.errors import StoreError
from reporting.store.users import Person, Role, authenticate, check_new_password, create

log = logging.getLogger(__name__)


def open_store(db: str | None, *, pooled: bool = False) -> Database:
    """The existing store named by ``--db``, ``$SEGREPORT_DB`` or ``./segreport.db``
    (``pooled``: PostgreSQL connections kept open, for the long-running server)."""
    return migrate.open_database(resolve_url(db), pooled=pooled)


def init_store(
    db: str | None, admin: str, *, full_name: str | None, password: str, origin: Origin
) -> Database:
    """Create a new store and its first user (roles admin and reader)."""
    url = resolve_url(db)
    check_new_password(password, f"user {admin}")
    path = sqlite_file(url)
    if path is not None and path.exists():
        raise StoreError(str(path), "already exists; `store init` creates a new store only")
    if path is not None:
        path.parent.mkdir(parents=True, exist_ok=True)
    database = Database(url)
    if path is None:
        with database.read() as session:
            if inspect(session.connection()).has_table("alembic_version"):
                raise StoreError(
                    database.shown, "already holds a store; `store init` creates a new store only"
                )
    try:
        migrate.upgrade(url)
        with database.write() as session:
            audit.append(
                session,
                action="store_init",
                actor=admin,
                origin=origin,
                detail={"schema": migrate.HEAD},
            )
            create(
                session,
                admin,
                full_name=full_name or admin,
                roles=(Role.ADMIN, Role.READER),
                password=password,
                temporary=False,
                actor=admin,
                origin=origin,
            )
    except BaseException:
        database.dispose()
        if path is not None:
            for leftover in (
                path,
                path.with_name(path.name + "-wal"),
                path.with_name(path.name + "-shm"),
            ):
                leftover.unlink(missing_ok=True)
        raise
    return database


def act_as(
    database: Database,
    name: str,
    password: str,
    *,
    role: Role | None = None,
    origin: Origin = Origin.CLI,
    settings: Settings | None = None,
) -> Person:
    """Authenticate the acting user (``--as``); a wrong password counts towards the lab's
    lockout (``settings``)."""
    return authenticate(database, name, password, role=role, origin=origin, settings=settings)
