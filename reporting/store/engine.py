"""Opening a store: the database URL, the engine and its sessions, and database errors as
located :class:`~reporting.store.errors.StoreError` lines.

The URL comes from ``--db PATH|URL``, else ``$SEGREPORT_DB``, else ``./segreport.db`` (a SQLite
file). SQLite connections run in WAL mode with foreign keys on (set on every connection) and, per
SQLAlchemy's pysqlite recipe, with the driver's own transaction handling off
(``isolation_level=None``) so that writing transactions start with ``BEGIN IMMEDIATE``: a deferred
BEGIN that reads and then writes fails at once with "database is locked" when another writer got
there first. On PostgreSQL (``postgresql+psycopg://…``) a writing transaction first takes a
transaction-level advisory lock. Either way all appends are serialised, so version numbers and
the audit chain never fork. Messages show the URL without its password.
"""

from __future__ import annotations

import logging
import os
import sqlite3
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from sqlalchemy import Connection, Engine, create_engine, event, text
from sqlalchemy.engine import URL, make_url
from sqlalchemy.exc import ArgumentError, DBAPIError, OperationalError
from sqlalchemy.orm import Session
from sqlalchemy.pool import NullPool

from reporting.store.errors import StoreError

log = logging.getLogger(__name__)

DB_ENV = "SEGREPORT_DB"
DEFAULT_DB = "segreport.db"
BUSY_TIMEOUT_MS = 10_000
"""How long a SQLite writer waits for another writer before "locked" is reported."""
ADVISORY_LOCK_KEY = 0x5E6_2E90_2714
"""PostgreSQL advisory lock key serialising every append (any fixed 64-bit number)."""
_WRITE = "segreport_write"


def resolve_url(db: str | None, environ: Mapping[str, str] | None = None) -> URL:
    """The store's URL from ``--db`` (a path or a URL), ``$SEGREPORT_DB`` or ``./segreport.db``."""
    env = os.environ if environ is None else environ
    choice = db or env.get(DB_ENV) or DEFAULT_DB
    if "://" not in choice:
        return URL.create("sqlite", database=str(Path(choice).expanduser().resolve()))
    try:
        url = make_url(choice)
    except ArgumentError:
        raise StoreError("--db", f"{choice!r} is not a database URL or file path") from None
    if url.drivername == "postgresql":  # psycopg 3 is the supported driver
        url = url.set(drivername="postgresql+psycopg")
    if url.get_backend_name() not in ("sqlite", "postgresql"):
        raise StoreError(
            shown(url), "only SQLite files and PostgreSQL (postgresql+psycopg://…) are supported"
        )
    return url


def shown(url: URL) -> str:
    """``url`` as text for messages: the password replaced by ``***``."""
    return url.render_as_string(hide_password=True)


def sqlite_file(url: URL) -> Path | None:
    """The file of a SQLite URL (``None`` for PostgreSQL or an in-memory database)."""
    if url.get_backend_name() != "sqlite" or url.database in (None, "", ":memory:"):
        return None
    return Path(url.database)


def make_engine(url: URL, *, foreign_keys: bool = True, pooled: bool = False) -> Engine:
    """An engine for ``url`` with the store's connection setup (see the module docstring).

    PostgreSQL connections are opened per use for a command (``NullPool``: a command runs a few
    transactions and exits) and kept in a pool for the long-running server (``pooled``), where a
    new connection per request would cost more than the request.
    """
    if url.get_backend_name() == "postgresql":
        timeout = {"connect_timeout": 10}
        if pooled:
            return create_engine(
                url, pool_size=5, max_overflow=10, pool_pre_ping=True, connect_args=timeout
            )
        return create_engine(url, poolclass=NullPool, connect_args=timeout)
    # pooled: the connection set-up below runs once per connection, not once per transaction
    engine = create_engine(url, connect_args={"timeout": BUSY_TIMEOUT_MS / 1000})

    @event.listens_for(engine, "connect")
    def _connect(dbapi_connection: Any, _record: Any) -> None:
        dbapi_connection.isolation_level = None  # we emit BEGIN ourselves
        cursor = dbapi_connection.cursor()
        cursor.execute(f"PRAGMA foreign_keys={'ON' if foreign_keys else 'OFF'}")
        cursor.execute("PRAGMA journal_mode=WAL")
        cursor.execute(f"PRAGMA busy_timeout={BUSY_TIMEOUT_MS}")
        cursor.close()

    @event.listens_for(engine, "begin")
    def _begin(conn: Any) -> None:
        immediate = conn.get_execution_options().get(_WRITE, False)
        conn.exec_driver_sql("BEGIN IMMEDIATE" if immediate else "BEGIN")

    return engine


class Database:
    """An open store database: reading and (serialised) writing sessions."""

    def __init__(self, url: URL, engine: Engine | None = None, *, pooled: bool = False) -> None:
        self.url = url
        self.shown = shown(url)
        self.dialect = url.get_backend_name()
        self.engine = engine or make_engine(url, pooled=pooled)
        self._writer = self.engine.execution_options(**{_WRITE: True})

    @contextmanager
    def read(self) -> Iterator[Session]:
        """A session for reading (a deferred transaction, rolled back at the end)."""
        with database_errors(self.shown), Session(self.engine) as session:
            yield session

    @contextmanager
    def connect(self) -> Iterator[Connection]:
        """A plain connection for quick reads (SQLAlchemy Core), rolled back at the end."""
        with database_errors(self.shown), self.engine.connect() as conn:
            yield conn

    @contextmanager
    def write(self) -> Iterator[Session]:
        """A writing transaction holding the store's append lock; committed when the block ends."""
        with (
            database_errors(self.shown),
            Session(self._writer, expire_on_commit=False) as session,
            session.begin(),
        ):
            if self.dialect == "postgresql":
                session.execute(
                    text("SELECT pg_advisory_xact_lock(:key)"), {"key": ADVISORY_LOCK_KEY}
                )
            yield session

    def dispose(self) -> None:
        self.engine.dispose()


@contextmanager
def database_errors(where: str) -> Iterator[None]:
    """Turn driver errors (unreachable, locked, read-only, refused by a trigger) into StoreError."""
    try:
        yield
    except (OperationalError, DBAPIError) as exc:
        raise StoreError(where, describe(exc)) from None
    except sqlite3.Error as exc:
        raise StoreError(where, f"database error: {exc}") from None


def describe(exc: DBAPIError) -> str:
    """A one-line reason for a database error."""
    original = exc.orig
    message = " ".join(str(original).split()) if original is not None else str(exc)
    if "locked" in message or "busy" in message:
        return (
            f"the database is locked by another process (waited {BUSY_TIMEOUT_MS // 1000} s); "
            "try again"
        )
    if "append-only" in message:
        return f"refused by the database: {message.split('segreport: ')[-1]}"
    if isinstance(exc, OperationalError):
        return f"cannot use the database: {message}"
    return f"database error: {message}"
