"""Database triggers that make the store's history append-only.

UPDATE and DELETE on studies, versions, signatures and events raise an error in the database
itself, and on PostgreSQL so does TRUNCATE (which row triggers do not see). SQLite's batch
migrations rebuild a table and lose its triggers, so every migration that touches one of these
tables removes the triggers first and installs them again at its end (a test checks this).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable

from reporting.store.schema import APPEND_ONLY_TABLES

PG_FUNCTION = "segreport_append_only"

Execute = Callable[[str], object]


def _sqlite_names(table: str) -> tuple[str, str]:
    return f"{table}_no_update", f"{table}_no_delete"


def install(execute: Execute, dialect: str, tables: Iterable[str] = APPEND_ONLY_TABLES) -> None:
    """Create the append-only triggers on ``tables`` (statements run through ``execute``)."""
    if dialect == "postgresql":
        execute(
            f"CREATE OR REPLACE FUNCTION {PG_FUNCTION}() RETURNS trigger LANGUAGE plpgsql AS $$ "
            "BEGIN RAISE EXCEPTION 'segreport: % is append-only (% refused)', TG_TABLE_NAME, TG_OP; "
            "END $$"
        )
        for table in tables:
            execute(
                f"CREATE TRIGGER {table}_append_only BEFORE UPDATE OR DELETE ON {table} "
                f"FOR EACH ROW EXECUTE FUNCTION {PG_FUNCTION}()"
            )
            execute(
                f"CREATE TRIGGER {table}_no_truncate BEFORE TRUNCATE ON {table} "
                f"FOR EACH STATEMENT EXECUTE FUNCTION {PG_FUNCTION}()"
            )
        return
    for table in tables:
        update, delete = _sqlite_names(table)
        execute(
            f"CREATE TRIGGER {update} BEFORE UPDATE ON {table} BEGIN "
            f"SELECT RAISE(ABORT, 'segreport: {table} is append-only (UPDATE refused)'); END"
        )
        execute(
            f"CREATE TRIGGER {delete} BEFORE DELETE ON {table} BEGIN "
            f"SELECT RAISE(ABORT, 'segreport: {table} is append-only (DELETE refused)'); END"
        )


def remove(execute: Execute, dialect: str, tables: Iterable[str] = APPEND_ONLY_TABLES) -> None:
    """Drop the append-only triggers of ``tables`` (for a migration that rewrites them)."""
    for table in tables:
        if dialect == "postgresql":
            execute(f"DROP TRIGGER IF EXISTS {table}_append_only ON {table}")
            execute(f"DROP TRIGGER IF EXISTS {table}_no_truncate ON {table}")
        else:
            for name in _sqlite_names(table):
                execute(f"DROP TRIGGER IF EXISTS {name}")


def expected_names(dialect: str, tables: Iterable[str] = APPEND_ONLY_TABLES) -> set[str]:
    """The trigger names :func:`install` creates."""
    names: set[str] = set()
    for table in tables:
        if dialect == "postgresql":
            names |= {f"{table}_append_only", f"{table}_no_truncate"}
        else:
            names |= set(_sqlite_names(table))
    return names
