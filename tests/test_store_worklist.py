"""The lab's worklist, saving with conflicts, hand-off and assignment at the store layer, on both
backends (SQLite file and a throwaway PostgreSQL cluster).

Statuses are FHIR R4 DiagnosticReport.status codes underneath (FACTS §9); the worklist table is
checked against a recomputation from the versions and signatures themselves.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest
from store_support import PASSWORD, cheap_argon2, pg_socket, store_url, study_data, write_study

from reporting.errors import InputError
from reporting.load import study_from_data
from reporting.model import Study
from reporting.store import saving, service, signing, users, versions, worklist
from reporting.store.canonical import Origin
from reporting.store.engine import Database
from reporting.store.errors import StoreError
from reporting.store.verify import verify
from reporting.store.worklist import Query, WorklistStatus

__all__ = ["cheap_argon2", "pg_socket", "store_url"]
WEB = Origin.WEB


@pytest.fixture
def db(store_url: str) -> Database:
    database = service.init_store(
        store_url, "alice", full_name="Dr Alice Example", password=PASSWORD, origin=Origin.CLI
    )
    admin = users.authenticate(database, "alice", PASSWORD, origin=Origin.CLI)
    for name, role in (("sam", users.Role.SONOGRAPHER), ("rita", users.Role.READER)):
        users.add(
            database, name, full_name=name.title(), roles=[role], password=PASSWORD,
            actor=admin.name, origin=Origin.CLI,
        )  # fmt: skip
        users.set_password(database, name, PASSWORD, temporary=False, actor=name, origin=WEB)
    return database


def person(db: Database, name: str) -> users.Person:
    return users.authenticate(db, name, PASSWORD, origin=WEB)


def study(study_id: str = "DEMO-0001", **changes: object) -> Study:
    data = study_data()
    data["study"]["id"] = study_id
    for dotted, value in changes.items():
        node = data
        *parents, last = dotted.split("__")
        for key in parents:
            node = node[key]
        node[last] = value
    return study_from_data(data, source="study")


def statuses(db: Database) -> dict[str, WorklistStatus]:
    _, rows = worklist.listing(db, Query(limit=500))
    return {r.study_id: r.status for r in rows}


def consistent(db: Database) -> None:
    with db.read() as session:
        assert worklist.stored(session) == worklist.rebuilt(session)


def test_statuses_follow_hand_off_save_sign_and_amend(db: Database) -> None:
    sam, rita = person(db, "sam"), person(db, "rita")
    first = saving.create(db, study(), sam, origin=WEB)
    # a sonographer's entry is preliminary and awaits a reader: the reader's worklist shows it unread
    assert (first.status, first.awaiting_reader) == ("preliminary", True)
    assert statuses(db) == {"DEMO-0001": WorklistStatus.UNREAD}
    _, rows = worklist.listing(db, Query(status=WorklistStatus.UNREAD))
    assert [(r.study_id, r.author, r.awaiting_reader) for r in rows] == [("DEMO-0001", "sam", True)]
    second, written = saving.save(
        db, "DEMO-0001", study(indication="Chest pain on exertion."), rita,
        if_match=first.etag, origin=WEB,
    )  # fmt: skip
    assert written and second.version == 2 and not second.awaiting_reader
    assert statuses(db) == {"DEMO-0001": WorklistStatus.PRELIMINARY}
    signing.sign(db, "DEMO-0001", rita, origin=WEB)
    assert statuses(db) == {"DEMO-0001": WorklistStatus.SIGNED}
    signing.amend(
        db, "DEMO-0001", rita, edited=study(indication="Chest pain at rest."),
        reason="indication corrected", origin=WEB,
    )  # fmt: skip
    assert statuses(db) == {"DEMO-0001": WorklistStatus.AMENDED}
    consistent(db)
    assert verify(db).events > 0  # the new "save" events and facts verify


def test_stale_save_is_refused_with_base_and_current_and_writes_nothing(db: Database) -> None:
    rita, alice = person(db, "rita"), person(db, "alice")
    first = saving.create(db, study(), rita, origin=WEB)
    saving.save(db, "DEMO-0001", study(indication="theirs"), alice, if_match=first.etag, origin=WEB)
    with pytest.raises(saving.Stale, match=r"version 2 was saved by alice") as caught:
        saving.save(
            db, "DEMO-0001", study(indication="mine"), rita, if_match=first.etag, origin=WEB
        )
    assert caught.value.base is not None and caught.value.base.version == 1
    assert caught.value.current.version == 2
    assert caught.value.current.study["indication"] == "theirs"
    assert saving.read(db, "DEMO-0001").version == 2  # nothing written


def test_saving_a_signed_study_is_refused(db: Database) -> None:
    rita = person(db, "rita")
    first = saving.create(db, study(), rita, origin=WEB)
    signing.sign(db, "DEMO-0001", rita, origin=WEB)
    with pytest.raises(saving.SignedStudy, match="use Amend or Addendum"):
        saving.save(db, "DEMO-0001", study(indication="x"), rita, if_match=first.etag, origin=WEB)


def test_save_refuses_another_patient_or_study_id(db: Database) -> None:
    rita = person(db, "rita")
    first = saving.create(db, study(), rita, origin=WEB)
    with pytest.raises(InputError, match="belongs to patient LV-100231"):  # bad: patient swapped
        saving.save(
            db, "DEMO-0001", study(patient__id="P-9"), rita, if_match=first.etag, origin=WEB
        )
    with pytest.raises(InputError, match="not DEMO-0001"):  # bad: body names another study
        saving.save(db, "DEMO-0001", study("OTHER-1"), rita, if_match=first.etag, origin=WEB)


def test_import_by_a_non_reader_awaits_a_reader(db: Database, tmp_path: Path) -> None:
    path = write_study(tmp_path / "in", study_data())
    versions.import_files(db, [path], person(db, "sam"), origin=Origin.CLI)
    assert statuses(db) == {"DEMO-0001": WorklistStatus.UNREAD}
    consistent(db)


def test_filters_by_status_date_reader_and_patient(db: Database) -> None:
    rita, sam = person(db, "rita"), person(db, "sam")
    for number, (who, date, patient) in enumerate(
        [(sam, "2026-01-05", "P-1"), (rita, "2026-02-05", "P-1"), (rita, "2026-03-05", "P-2")]
    ):
        saving.create(
            db, study(f"S-{number}", study__date=date, patient__id=patient), who, origin=WEB
        )
    signing.sign(db, "S-2", rita, origin=WEB)
    worklist.assign(db, "S-0", "rita", actor="alice", origin=WEB)
    total, rows = worklist.listing(db, Query())
    assert total == 3 and [r.study_id for r in rows] == ["S-2", "S-1", "S-0"]  # newest date first

    def ids(**kw: object) -> list[str]:
        return [r.study_id for r in worklist.listing(db, Query(**kw))[1]]  # type: ignore[arg-type]

    assert ids(status=WorklistStatus.UNREAD) == ["S-0"]
    assert ids(status=WorklistStatus.PRELIMINARY) == ["S-1"]
    assert ids(status=WorklistStatus.SIGNED) == ["S-2"]
    assert ids(patient="P-1") == ["S-1", "S-0"]
    assert ids(reader="rita") == ["S-0"]
    assert ids(date_from=dt.date(2026, 2, 1), date_to=dt.date(2026, 2, 28)) == ["S-1"]
    assert ids(limit=1, offset=1) == ["S-1"]
    consistent(db)


def test_assignment_needs_a_reader_and_is_audited(db: Database) -> None:
    saving.create(db, study(), person(db, "sam"), origin=WEB)
    with pytest.raises(StoreError, match="does not have the reader role"):  # bad: a sonographer
        worklist.assign(db, "DEMO-0001", "sam", actor="alice", origin=WEB)
    with pytest.raises(StoreError, match="no user 'nobody'"):  # bad: unknown user
        worklist.assign(db, "DEMO-0001", "nobody", actor="alice", origin=WEB)
    assert worklist.assign(db, "DEMO-0001", "rita", actor="alice", origin=WEB) is None
    assert worklist.assign(db, "DEMO-0001", "alice", actor="alice", origin=WEB) == "rita"
    assert worklist.assign(db, "DEMO-0001", None, actor="alice", origin=WEB) == "alice"
    from reporting.store.history import history

    events = [e for e in history(db, "DEMO-0001")["events"] if e["action"] == "assign"]
    assert [(e["actor"], e["origin"]) for e in events] == [("alice", "web")] * 3
    assert saving.read(db, "DEMO-0001").assigned_reader is None


@pytest.mark.parametrize(
    ("limit", "offset", "message"),
    [
        (0, 0, "limit"),  # bad: an empty page
        (501, 0, "limit"),  # bad: more than a page may hold
        (10, -1, "offset"),  # bad: negative offset
    ],
    ids=["zero-limit", "huge-limit", "negative-offset"],
)
def test_bad_paging_is_refused(db: Database, limit: int, offset: int, message: str) -> None:
    with pytest.raises(StoreError, match=message):
        worklist.listing(db, Query(limit=limit, offset=offset))
