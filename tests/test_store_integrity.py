"""Integrity of the report store on both backends: append-only triggers (kept by migrations),
tampering found by ``store verify``, concurrent amendments, and database faults as located errors.
"""

from __future__ import annotations

import threading
from pathlib import Path

import pytest
from sqlalchemy import text
from store_support import PASSWORD, cheap_argon2, pg_socket, store_url, study_data, write_study

from reporting.store import migrate, service, signing, triggers, users, versions
from reporting.store.canonical import Origin
from reporting.store.engine import Database, make_engine, resolve_url
from reporting.store.errors import ConflictError, IntegrityFailure, StoreError
from reporting.store.verify import verify

__all__ = ["cheap_argon2", "pg_socket", "store_url"]
CLI = Origin.CLI


@pytest.fixture
def db(store_url: str) -> Database:
    return service.init_store(
        store_url, "alice", full_name="Dr Alice Example", password=PASSWORD, origin=CLI
    )


def login(db: Database) -> users.Person:
    return users.authenticate(db, "alice", PASSWORD, origin=CLI)


def signed_study(db: Database, tmp_path: Path) -> None:
    path = write_study(tmp_path / "in", study_data())
    versions.import_files(db, [path], login(db), origin=CLI)
    signing.sign(db, "DEMO-0001", login(db), origin=CLI)


def trigger_names(db: Database) -> set[str]:
    with db.read() as session:
        if db.dialect == "sqlite":
            query = "SELECT name FROM sqlite_master WHERE type = 'trigger'"
        else:
            query = "SELECT tgname FROM pg_trigger WHERE NOT tgisinternal"
        return {row[0] for row in session.execute(text(query))}


def raw(db: Database, statement: str) -> None:
    """Run SQL behind the store's back, as someone with the database file or a superuser would."""
    with db.engine.begin() as conn:
        conn.exec_driver_sql(statement)


def test_migrations_head_matches_the_scripts() -> None:
    assert migrate.script_head() == migrate.HEAD


def test_migrations_keep_the_append_only_triggers(db: Database) -> None:
    # 0002 rebuilds the versions table on SQLite (a batch migration), which drops its triggers
    assert trigger_names(db) >= triggers.expected_names(db.dialect)


def test_upgrade_from_the_first_schema_keeps_data_and_triggers(tmp_path: Path) -> None:
    from alembic import command

    url = resolve_url(str(tmp_path / "old.db"))
    engine = make_engine(url, foreign_keys=False)
    with engine.begin() as conn:
        command.upgrade(migrate.alembic_config(conn), "0001")  # type: ignore[arg-type]
        conn.exec_driver_sql(
            "INSERT INTO studies (id, study_id, created_at) VALUES (1, 'S-1', 't')"
        )
        conn.exec_driver_sql(
            "INSERT INTO versions (study_pk, version, status, author, created_at, content, content_sha256) "
            """VALUES (1, 1, 'preliminary', 'a', 't', CAST('{"study":{"study":{"date":"2026-01-02"}}}' AS BLOB), 'x')"""
        )
    engine.dispose()
    with pytest.raises(StoreError, match=r"needs a migration .*run `segreport store upgrade --db"):
        migrate.open_database(url)
    assert migrate.upgrade(url) == ("0001", migrate.HEAD)
    db = migrate.open_database(url)
    assert trigger_names(db) >= triggers.expected_names("sqlite")
    with db.read() as session:
        assert session.execute(text("SELECT study_date FROM versions")).scalar() == "2026-01-02"
        # 0004 fills the worklist from each study's latest version
        worklist = session.execute(text("SELECT status, version, awaiting_reader FROM worklist"))
        assert [tuple(r) for r in worklist] == [("preliminary", 1, 0)]


@pytest.mark.parametrize("table", ["versions", "signatures", "events", "studies"])
def test_database_refuses_update_and_delete(db: Database, tmp_path: Path, table: str) -> None:
    signed_study(db, tmp_path)
    column = {
        "versions": "author",
        "signatures": "meaning",
        "events": "actor",
        "studies": "patient_id",
    }[table]
    for statement in (f"UPDATE {table} SET {column} = 'mallory'", f"DELETE FROM {table}"):
        with pytest.raises(Exception, match="append-only"):  # bad: rewriting history
            raw(db, statement)


def test_postgresql_refuses_truncate(store_url: str) -> None:
    if not store_url.startswith("postgresql"):
        return  # SQLite has no TRUNCATE
    db = service.init_store(store_url, "alice", full_name=None, password=PASSWORD, origin=CLI)
    with pytest.raises(Exception, match="append-only"):  # bad: TRUNCATE skips row triggers
        raw(db, "TRUNCATE events CASCADE")


def drop_trigger(db: Database, table: str) -> None:
    triggers.remove(lambda sql: raw(db, sql), db.dialect, [table])


@pytest.mark.parametrize(
    ("table", "statement", "message"),
    [
        (
            "versions",
            "UPDATE versions SET content = {blob}",
            "study DEMO-0001 version 1: the stored content does not match",
        ),
        (
            "signatures",
            "UPDATE signatures SET pdf = {blob}",
            "signature of study DEMO-0001 version 1: the stored PDF does not match",
        ),
        (
            "signatures",
            "UPDATE signatures SET record_json = {blob}",
            "the stored record does not match",
        ),
        (
            "signatures",
            "UPDATE signatures SET meaning = 'authorship only'",
            "meaning differs from event",
        ),
        (
            "events",
            "UPDATE events SET actor = 'mallory' WHERE action = 'sign'",
            "column actor differs from the hashed event",
        ),
        ("versions", "UPDATE versions SET author = 'mallory'", "author differs from event"),
        (
            # SQLite stores a text literal as TEXT in a BLOB column: found, not a traceback
            "versions",
            "UPDATE versions SET content = 'altered'",
            "study DEMO-0001 version 1: the stored content does not match",
        ),
    ],
    ids=["content", "pdf", "record", "meaning", "event-column", "version-author", "content-text"],
)
def test_tampering_is_found_by_verify(
    db: Database, tmp_path: Path, table: str, statement: str, message: str
) -> None:
    signed_study(db, tmp_path)
    head = verify(db).head
    drop_trigger(db, table)  # an attacker with the database first removes the trigger
    blob = "X'00'" if db.dialect == "sqlite" else "'\\x00'::bytea"
    raw(db, statement.format(blob=blob))
    with pytest.raises(IntegrityFailure, match=message):
        verify(db, head)


def test_rewritten_store_is_found_only_with_an_external_head(db: Database, tmp_path: Path) -> None:
    signed_study(db, tmp_path)
    signing.amend(db, "DEMO-0001", login(db), addendum="added later", origin=CLI)
    kept = verify(db).head  # e.g. printed on the addendum's PDF, or written with an export
    for table in ("signatures", "versions", "events"):
        drop_trigger(db, table)
    # the owner of the database removes the addendum consistently: rows and their events
    raw(
        db, "DELETE FROM signatures WHERE version_pk IN (SELECT id FROM versions WHERE version = 2)"
    )
    raw(db, "DELETE FROM versions WHERE version = 2")
    raw(db, "DELETE FROM events WHERE version = 2")
    assert verify(db).versions == 1  # the rewritten store is consistent in itself…
    with pytest.raises(IntegrityFailure, match="does not contain the expected head"):
        verify(db, kept)  # …which only a head kept elsewhere reveals


def test_two_amendments_of_one_version_at_once_one_wins(
    db: Database, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    signed_study(db, tmp_path)
    barrier = threading.Barrier(2, timeout=30)
    original = signing._render

    def render_then_wait(*args: object, **kwargs: object) -> object:
        result = original(*args, **kwargs)  # type: ignore[arg-type]
        barrier.wait()  # both have read version 1 and rendered before either appends
        return result

    monkeypatch.setattr(signing, "_render", render_then_wait)
    who = login(db)
    outcomes: list[object] = []

    def amend(note: str) -> None:
        other = Database(db.url)
        try:
            outcomes.append(signing.amend(other, "DEMO-0001", who, addendum=note, origin=CLI))
        except Exception as exc:
            outcomes.append(exc)
        finally:
            other.dispose()

    threads = [threading.Thread(target=amend, args=(n,)) for n in ("first note", "second note")]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    conflicts = [o for o in outcomes if isinstance(o, ConflictError)]
    winners = [o for o in outcomes if isinstance(o, signing.Signed)]
    assert len(conflicts) == 1 and len(winners) == 1, outcomes
    assert "already superseded by version 2" in str(conflicts[0])
    assert verify(db).versions == 2  # nothing half-written, the chain intact


def test_missing_store_is_not_created(tmp_path: Path) -> None:
    path = tmp_path / "absent.db"
    with pytest.raises(StoreError, match="no store here; create one with `segreport store init"):
        service.open_store(str(path))
    assert not path.exists()


def test_unreachable_postgresql_shows_url_without_password() -> None:
    url = "postgresql+psycopg://lab:s3cret-pw@/nodb?host=/nonexistent-socket-dir"
    with pytest.raises(StoreError) as caught:
        service.open_store(url)
    message = str(caught.value)
    assert (
        "s3cret-pw" not in message
        and "lab:***@" in message
        and "cannot use the database" in message
    )


def test_locked_sqlite_store_is_a_clear_error(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from reporting.store import engine

    db = service.init_store(
        str(tmp_path / "s.db"), "alice", full_name=None, password=PASSWORD, origin=CLI
    )
    monkeypatch.setattr(engine, "BUSY_TIMEOUT_MS", 200)
    other = Database(db.url, engine.make_engine(db.url))
    with db.write() as held:  # another process holds the write lock
        held.execute(text("SELECT 1"))
        with pytest.raises(StoreError, match="locked by another process"), other.write() as session:
            session.execute(text("SELECT 1"))
    other.dispose()


def test_the_server_keeps_postgresql_connections_and_commands_do_not(store_url: str) -> None:
    # SQLAlchemy 2 pooling: a QueuePool keeps connections for the long-running server (a new
    # PostgreSQL connection per request costs more than the request); a command opens per use
    from sqlalchemy.pool import NullPool, QueuePool

    service.init_store(
        store_url, "alice", full_name="Alice", password=PASSWORD, origin=Origin.CLI
    ).dispose()
    server = service.open_store(store_url, pooled=True)
    command = service.open_store(store_url)
    try:
        if store_url.startswith("postgresql"):
            assert isinstance(server.engine.pool, QueuePool)
            assert isinstance(command.engine.pool, NullPool)
            for _ in range(3):
                with server.read() as session:
                    session.execute(text("SELECT 1"))
            assert server.engine.pool.checkedin() == 1  # one connection, reused
        else:  # SQLite engines pool either way (the connection set-up runs once per connection)
            assert not isinstance(server.engine.pool, NullPool)
        with server.read() as session:  # and the pooled store is a working store
            assert session.execute(text("SELECT count(*) FROM users")).scalar_one() == 1
    finally:
        server.dispose()
        command.dispose()


def test_a_prior_is_read_once_and_an_altered_one_is_refused(db: Database, tmp_path: Path) -> None:
    # The lab server keeps parsed prior records by their SHA-256 (a signed record never changes);
    # a record altered in the database after its trigger was dropped must not be used as the
    # prior, whether or not an earlier copy was kept (21 CFR 11.10(a): detect altered records).
    import datetime as dt

    from reporting.store import history

    signed_study(db, tmp_path)
    patient = study_data()["patient"]["id"]
    later = dt.date(2030, 1, 1)
    with db.read() as session:
        first = history.prior_signed(session, patient, later)
        again = history.prior_signed(session, patient, later)
    assert first is not None and again is not None
    assert again.record is first.record  # read and parsed once
    assert (first.study_id, first.version) == ("DEMO-0001", 1)
    history._RECORDS.clear()  # a server started after the alteration
    drop_trigger(db, "signatures")
    blob = "X'7b7d'" if db.dialect == "sqlite" else "'\\x7b7d'::bytea"  # the bytes of "{}"
    raw(db, f"UPDATE signatures SET record_json = {blob}")
    with db.read() as session, pytest.raises(IntegrityFailure, match="does not match its SHA-256"):
        history.prior_signed(session, patient, later)
