"""Schema migrations (Alembic, shipped inside the package) and the check that a store is current.

Every command except ``store init`` opens an existing store only: a missing SQLite file, a
database without segreport tables, or one whose schema is behind is refused with the command to
run. ``store upgrade`` applies the migrations; ``store init`` applies them to a new database.
"""

from __future__ import annotations

import logging
from pathlib import Path

from sqlalchemy import Connection, inspect
from sqlalchemy.engine import URL

from reporting.store.engine import Database, database_errors, make_engine, shown, sqlite_file
from reporting.store.errors import StoreError

log = logging.getLogger(__name__)

HEAD = "0004_worklist"
"""The newest migration (a test checks it against the migration scripts)."""
MIGRATIONS = Path(__file__).parent / "migrations"


def alembic_config(connection: Connection | None = None) -> object:
    from alembic.config import Config

    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS))
    config.attributes["connection"] = connection
    return config


def script_head() -> str | None:
    """The head revision according to the migration scripts themselves."""
    from alembic.config import Config
    from alembic.script import ScriptDirectory

    config = alembic_config()
    assert isinstance(config, Config)
    return ScriptDirectory.from_config(config).get_current_head()


def current_revision(connection: Connection) -> str | None:
    if not inspect(connection).has_table("alembic_version"):
        return None
    from alembic.runtime.migration import MigrationContext

    return MigrationContext.configure(connection).get_current_revision()


def upgrade(url: URL) -> tuple[str | None, str]:
    """Apply every pending migration to ``url``; return the revisions before and after."""
    from alembic import command

    # Foreign keys off while SQLite batch migrations rebuild tables (a no-op on PostgreSQL).
    engine = make_engine(url, foreign_keys=False)
    try:
        with database_errors(shown(url)), engine.begin() as connection:
            before = current_revision(connection)
            command.upgrade(alembic_config(connection), "head")  # type: ignore[arg-type]
            if url.get_backend_name() == "sqlite":
                broken = connection.exec_driver_sql("PRAGMA foreign_key_check").all()
                if broken:
                    raise StoreError(shown(url), f"migration broke foreign keys: {broken[:3]}")
            after = current_revision(connection)
    finally:
        engine.dispose()
    log.info("store %s migrated from %s to %s", shown(url), before, after)
    assert after is not None
    return before, after


def open_database(url: URL, *, pooled: bool = False) -> Database:
    """An existing store at ``url`` whose schema is current; refuses anything else
    (``pooled``: keep PostgreSQL connections open, for the server)."""
    path = sqlite_file(url)
    if path is not None and not path.exists():
        raise StoreError(
            shown(url),
            "no store here; create one with `segreport store init --admin NAME` "
            "(or name another with --db or SEGREPORT_DB)",
        )
    db = Database(url, pooled=pooled)
    with db.read() as session:
        revision = current_revision(session.connection())
    if revision == HEAD:
        return db
    db.dispose()
    if revision is None:
        raise StoreError(
            shown(url),
            "not a segreport store (no store tables); create one with "
            "`segreport store init --admin NAME`",
        )
    if revision < HEAD:
        raise StoreError(
            shown(url),
            f"the store needs a migration (schema {revision}, this segreport uses {HEAD}): "
            f"run `segreport store upgrade --db {shown(url)}` after a backup",
        )
    raise StoreError(
        shown(url),
        f"the store's schema {revision} is newer than this segreport knows ({HEAD}); "
        "use a newer segreport",
    )
