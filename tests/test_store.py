"""The report store on both backends (SQLite file and a throwaway PostgreSQL cluster): users and
passwords, immutable versions, signing, amendments and addenda, history, export.

FHIR R4 DiagnosticReport.status codes and 21 CFR 11.50/11.200 (FACTS §9) are the reference for
the statuses and the signature manifestation checked here.
"""

from __future__ import annotations

import copy
import datetime as dt
import io
from pathlib import Path

import pypdf
import pytest
from store_support import PASSWORD, cheap_argon2, pg_socket, store_url, study_data, write_study

from reporting.settings import default_settings
from reporting.store import history, service, signing, users, versions
from reporting.store.canonical import Origin
from reporting.store.engine import Database
from reporting.store.errors import AuthError, StoreError
from reporting.store.status import VersionStatus

__all__ = ["cheap_argon2", "pg_socket", "store_url"]  # fixtures used by name
CLI = Origin.CLI


@pytest.fixture
def db(store_url: str) -> Database:
    return service.init_store(
        store_url, "alice", full_name="Dr Alice Example", password=PASSWORD, origin=CLI
    )


def login(db: Database, name: str = "alice", password: str = PASSWORD) -> users.Person:
    return users.authenticate(db, name, password, origin=CLI)


def pdf_text(data: bytes, page: int = 0) -> str:
    return " ".join(pypdf.PdfReader(io.BytesIO(data)).pages[page].extract_text().split())


def imported(db: Database, tmp_path: Path, data: dict | None = None) -> list[versions.Imported]:
    path = write_study(tmp_path / "in", data or study_data())
    return versions.import_files(db, [path], login(db), origin=CLI)


def test_sign_stores_record_and_pdf_and_show_returns_them_byte_for_byte(
    db: Database, tmp_path: Path
) -> None:
    imported(db, tmp_path)
    signed = signing.sign(db, "DEMO-0001", login(db), meaning="reviewed and approved", origin=CLI)
    assert (signed.version, signed.status) == (1, VersionStatus.FINAL)
    paths = history.show(db, "DEMO-0001", 1, tmp_path / "out")
    pdf = paths[2].read_bytes()
    import hashlib

    assert hashlib.sha256(pdf).hexdigest() == signed.pdf_sha256
    text = pdf_text(pdf, -1)
    # 21 CFR 11.50: printed name, date and time, meaning; plus version, record hash and chain head
    for expected in (
        "Dr Alice Example",
        "reviewed and approved",
        "Version 1 (final)",
        signed.record_sha256[:12],
        "UTC",
    ):
        assert expected in text
    data = history.history(db, "DEMO-0001")
    assert [v["status"] for v in data["versions"]] == ["final"]
    assert set(data["versions"][0]) >= {
        "version",
        "status",
        "author",
        "created_at",
        "reason",
        "content_sha256",
        "signature",
    }
    assert set(data["versions"][0]["signature"]) >= {
        "signer",
        "signed_at",
        "meaning",
        "record_sha256",
        "pdf_sha256",
    }
    assert [e["action"] for e in data["events"]] == ["import", "sign"]
    assert set(data["events"][0]) >= {"seq", "at", "actor", "action", "version", "origin"}


def test_import_rules_new_version_noop_signed_and_other_patient(
    db: Database, tmp_path: Path
) -> None:
    data = study_data()
    assert [(i.version, i.new) for i in imported(db, tmp_path, data)] == [(1, True)]
    assert [(i.version, i.new) for i in imported(db, tmp_path, data)] == [(1, False)]  # unchanged
    data["stages"]["peak"]["heart_rate_bpm"] = 141
    assert [(i.version, i.new) for i in imported(db, tmp_path, data)] == [(2, True)]
    other = study_data()
    other["patient"]["id"] = "LV-999999"  # bad: the same study id for another patient
    with pytest.raises(StoreError, match="belongs to patient LV-100231"):
        imported(db, tmp_path, other)
    signing.sign(db, "DEMO-0001", login(db), origin=CLI)
    data["stages"]["peak"]["heart_rate_bpm"] = 142  # bad: a signed study changes only by amendment
    with pytest.raises(StoreError, match="is signed: change it with `segreport store amend`"):
        imported(db, tmp_path, data)
    assert [v["version"] for v in history.history(db, "DEMO-0001")["versions"]] == [1, 2]


@pytest.mark.parametrize(
    ("name", "password", "message"),
    [
        ("alice", "not the password", "wrong password"),  # bad: wrong password
        ("mallory", PASSWORD, "unknown user"),  # bad: nobody of that name
    ],
    ids=["wrong-password", "unknown-user"],
)
def test_bad_credentials_are_refused_and_audited(
    db: Database, name: str, password: str, message: str
) -> None:
    with pytest.raises(AuthError, match=message):
        users.authenticate(db, name, password, origin=CLI)
    from reporting.store.verify import verify

    assert verify(db).events >= 3  # init, user_add, auth_failed


def test_lockout_after_repeated_wrong_passwords_until_unlocked(db: Database) -> None:
    # 21 CFR 11.300(d); the limit is the lab setting lockout_failures (NIST SP 800-63B 5.2.2)
    for _ in range(default_settings().lockout_failures):
        with pytest.raises(AuthError):
            users.authenticate(db, "alice", "wrong wrong wrong", origin=CLI)
    with pytest.raises(AuthError, match="locked"):  # bad: even the right password, once locked
        login(db)
    users.add(
        db,
        "root2",
        full_name="Admin Two",
        roles=[users.Role.ADMIN],
        password="temporary pass 1",
        actor="alice",
        origin=CLI,
    )
    users.unlock(db, "alice", actor="root2", origin=CLI)
    assert login(db).name == "alice"


def test_lockout_ends_by_itself_after_lockout_minutes(db: Database) -> None:
    lab = default_settings().model_copy(update={"lockout_failures": 2, "lockout_minutes": 15})
    for _ in range(2):
        with pytest.raises(AuthError):
            users.authenticate(db, "alice", "wrong wrong wrong", origin=CLI, settings=lab)
    with pytest.raises(AuthError, match="locked; try again later"):
        users.authenticate(db, "alice", PASSWORD, origin=CLI, settings=lab)
    with db.write() as session:  # the lock's time has run out (no waiting 15 minutes)
        user = users.find(session, "alice")
        assert user is not None and user.locked_until is not None
        past = dt.datetime.fromisoformat(user.locked_until) - dt.timedelta(minutes=16)
        user.locked_until = past.isoformat()
    assert users.authenticate(db, "alice", PASSWORD, origin=CLI, settings=lab).name == "alice"
    with db.read() as session:
        user = users.find(session, "alice")
        assert user is not None and not user.locked and user.failed_attempts == 0


def test_lockout_without_minutes_waits_for_an_admin(db: Database) -> None:
    lab = default_settings().model_copy(update={"lockout_failures": 1, "lockout_minutes": None})
    with pytest.raises(AuthError):
        users.authenticate(db, "alice", "wrong wrong wrong", origin=CLI, settings=lab)
    with pytest.raises(AuthError, match="an admin must unlock it"):
        users.authenticate(db, "alice", PASSWORD, origin=CLI, settings=lab)


def test_reset_password_cannot_sign_until_changed(db: Database, tmp_path: Path) -> None:
    users.add(
        db,
        "bob",
        full_name="Dr Bob Reader",
        roles=[users.Role.READER],
        password="temporary pass 1",
        actor="alice",
        origin=CLI,
    )
    imported(db, tmp_path)
    bob = users.authenticate(db, "bob", "temporary pass 1", origin=CLI)
    with pytest.raises(AuthError, match="change it first"):  # bad: an admin-set password
        signing.sign(db, "DEMO-0001", bob, origin=CLI)
    users.set_password(db, "bob", "bob's own secret", temporary=False, actor="bob", origin=CLI)
    bob = users.authenticate(db, "bob", "bob's own secret", origin=CLI)
    assert signing.sign(db, "DEMO-0001", bob, origin=CLI).version == 1
    users.set_password(db, "bob", "temporary pass 2", temporary=True, actor="alice", origin=CLI)
    bob = users.authenticate(db, "bob", "temporary pass 2", origin=CLI)
    assert bob.must_change_password


def test_a_signed_version_is_never_signed_again(db: Database, tmp_path: Path) -> None:
    imported(db, tmp_path)
    signing.sign(db, "DEMO-0001", login(db), origin=CLI)
    with pytest.raises(StoreError, match="already signed"):  # bad: re-signing
        signing.sign(db, "DEMO-0001", login(db), origin=CLI)


def test_amendment_names_superseded_version_and_reason_on_page_one(
    db: Database, tmp_path: Path
) -> None:
    imported(db, tmp_path)
    first = signing.sign(db, "DEMO-0001", login(db), origin=CLI)
    data = study_data()
    data["stages"]["peak"]["heart_rate_bpm"] = 139
    path = write_study(tmp_path / "amend", data)
    with pytest.raises(Exception, match="needs a reason"):  # bad: amending without a reason
        signing.amend(db, "DEMO-0001", login(db), path=path, origin=CLI)
    amended = signing.amend(
        db, "DEMO-0001", login(db), path=path, reason="peak heart rate mistyped", origin=CLI
    )
    assert (amended.version, amended.status) == (2, VersionStatus.AMENDED)
    pdf = history.show(db, "DEMO-0001", 2, tmp_path / "out")[2].read_bytes()
    page1 = pdf_text(pdf, 0)
    assert "version 2 supersedes version 1" in page1 and "peak heart rate mistyped" in page1
    # the heading and every footer give the version's own FHIR status, not "final"
    assert "Report status: AMENDED" in page1 and "FINAL" not in page1
    assert "DEMO-0001 · Brennan Quillfeather · amended" in pdf_text(pdf, -1)
    assert "Report status: FINAL" in pdf_text(
        history.show(db, "DEMO-0001", 1, tmp_path / "first")[2].read_bytes(), 0
    )
    appended = signing.amend(
        db, "DEMO-0001", login(db), addendum="Recovery images reviewed again.", origin=CLI
    )
    assert (appended.version, appended.status) == (3, VersionStatus.APPENDED)
    assert "Recovery images reviewed again." in pdf_text(
        history.show(db, "DEMO-0001", 3, tmp_path / "o3")[2].read_bytes()
    )
    import hashlib

    again = history.show(db, "DEMO-0001", 1, tmp_path / "o1")[2].read_bytes()
    assert hashlib.sha256(again).hexdigest() == first.pdf_sha256
    statuses = [v["status"] for v in history.history(db, "DEMO-0001")["versions"]]
    assert statuses == ["final", "amended", "appended"]  # FHIR DiagnosticReport.status codes


def test_amending_an_unsigned_study_is_refused(db: Database, tmp_path: Path) -> None:
    imported(db, tmp_path)
    with pytest.raises(StoreError, match="not signed yet"):  # bad: nothing signed to amend
        signing.amend(db, "DEMO-0001", login(db), addendum="note", origin=CLI)


def test_stale_impression_blocks_signing(db: Database, tmp_path: Path) -> None:
    # DEMO-0004 carries the hash of the findings its impression was written against (issue #13).
    data = study_data("DEMO-0004")
    peak = data["stages"]["peak"]
    assert isinstance(peak["wall_motion"], str)
    changed = copy.deepcopy(data)
    # bad: segment 1 made akinetic at peak after the reader wrote the impression
    changed["stages"]["peak"]["wall_motion"] = "3" + peak["wall_motion"][1:]
    imported(db, tmp_path, changed)
    with pytest.raises(StoreError, match="written against earlier findings"):
        signing.sign(db, "DEMO-0004", login(db), origin=CLI)
    imported(db, tmp_path, data)  # the scores as the reader saw them: a new unsigned version
    assert signing.sign(db, "DEMO-0004", login(db), origin=CLI).version == 2


def test_prior_study_is_the_latest_earlier_signed_study_of_the_patient(
    db: Database, tmp_path: Path
) -> None:
    dates = {"P-1": "2024-03-01", "P-2": "2025-05-02", "P-3": "2026-01-10"}
    for sid, date in dates.items():
        data = study_data()
        data["study"]["id"], data["study"]["date"] = sid, date
        imported(db, tmp_path, data)
    for sid in ("P-1", "P-2"):
        signing.sign(db, sid, login(db), origin=CLI)
    prior = history.prior_for(db, "P-3")
    assert prior is not None and (prior.study_id, str(prior.study_date)) == ("P-2", "2025-05-02")
    assert history.prior_for(db, "P-1") is None


def test_a_user_without_the_role_is_refused_even_with_no_roles_at_all(db: Database) -> None:
    # 21 CFR 11.10(g) authority checks: a role check must not pass for a user who holds no role
    with db.write() as session:
        users.create(
            session,
            "nora",
            full_name="Nora Example",
            roles=(),
            password=PASSWORD,
            temporary=False,
            actor="alice",
            origin=CLI,
        )
    assert users.authenticate(db, "nora", PASSWORD, origin=CLI).roles == frozenset()
    with pytest.raises(AuthError, match="needs the reader role"):  # bad: no role, signing
        users.authenticate(db, "nora", PASSWORD, role=users.Role.READER, origin=CLI)


def test_an_admin_password_reset_unlocks_the_account(db: Database) -> None:
    # the reset's documented promise: a locked-out user gets in with the temporary password
    users.add(
        db, "bob", full_name="Bob", roles=[users.Role.READER], password=PASSWORD,
        actor="alice", origin=CLI,
    )  # fmt: skip
    for _ in range(default_settings().lockout_failures):
        with pytest.raises(AuthError):  # bad: wrong passwords until the account locks
            users.authenticate(db, "bob", "not bob's password", origin=CLI)
    with pytest.raises(AuthError, match="locked"):
        users.authenticate(db, "bob", PASSWORD, origin=CLI)
    users.set_password(db, "bob", "temporary pass 9", temporary=True, actor="alice", origin=CLI)
    assert users.authenticate(db, "bob", "temporary pass 9", origin=CLI).must_change_password
