"""The lab page's study routes on both backends (SQLite file, throwaway PostgreSQL cluster):
hand-off, worklist, saving with conflicts (428/412/409, nothing written), signing in the page
(password again, lockout), amend and addendum, the signed PDF, history with the audit trail,
assignment, the patient's earlier studies and the comparison with the prior signed study.

References: RFC 9110 §13.1.1 and RFC 6585 §3 (If-Match, 412, 428); FHIR R4 DiagnosticReport.status
(FACTS §9); 21 CFR 11.200 (the password re-entered at signing) and 11.300 (lockout). The
comparison is checked against :mod:`reporting.comparison` run on the analyses directly.
"""

from __future__ import annotations

import copy
import json
from pathlib import Path
from typing import Any

import pytest
from fastapi.testclient import TestClient
from lab_support import BASE_URL, lab_store, sign_in
from sqlalchemy import select
from store_support import PASSWORD, cheap_argon2, pg_socket, store_url, study_data

from reporting.analysis import analyze
from reporting.comparison import with_comparison
from reporting.export.record import record_dict
from reporting.load import study_from_data
from reporting.settings import HeartRateFormula, default_settings
from reporting.store import conflicts, history
from reporting.store.engine import Database
from reporting.store.schema import EventRow
from reporting.web.lab import create_lab_app

__all__ = ["cheap_argon2", "pg_socket", "store_url"]


@pytest.fixture
def db(store_url: str) -> Database:
    return lab_store(store_url)


@pytest.fixture
def app(db: Database) -> Any:
    return create_lab_app(db, settings=default_settings())


def signed_in(app: Any, name: str) -> TestClient:
    """A browser of its own (own cookie jar) signed in as ``name``, on the one app."""
    client = TestClient(app, base_url=BASE_URL)
    sign_in(client, name)
    return client


def study(study_id: str = "DEMO-0001", **dotted: Any) -> dict[str, Any]:
    data = study_data()
    data["study"]["id"] = study_id
    data["study"].pop("report_status", None)
    for path, value in dotted.items():
        node = data
        *parents, last = path.split("__")
        for key in parents:
            node = node[key]
        node[last] = value
    plain: dict[str, Any] = json.loads(json.dumps(data, default=str))  # YAML dates as text
    return plain


def created(client: TestClient, data: dict[str, Any]) -> dict[str, Any]:
    answer = client.post("/api/studies", json={"study": data})
    assert answer.status_code == 201, answer.text
    assert answer.headers["etag"] == answer.json()["etag"]
    body: dict[str, Any] = answer.json()
    return body


def versions_of(db: Database, study_id: str) -> list[int]:
    return [v["version"] for v in history.history(db, study_id)["versions"]]


def test_sonographer_hand_off_reaches_the_readers_worklist(app: Any) -> None:
    sam, rita = signed_in(app, "sam"), signed_in(app, "rita")
    first = created(sam, study())
    assert (first["status"], first["awaiting_reader"], first["read_only"]) == (
        "preliminary",
        True,
        False,
    )
    unread = rita.get("/api/worklist", params={"status": "unread"}).json()
    assert unread["total"] == 1
    (row,) = unread["rows"]
    assert (row["study_id"], row["author"], row["awaiting_reader"]) == ("DEMO-0001", "sam", True)
    opened = rita.get("/api/studies/DEMO-0001")
    data = opened.json()["study"]
    data["impression"] = "No inducible ischaemia."
    saved = rita.put(
        "/api/studies/DEMO-0001", json={"study": data}, headers={"if-match": opened.headers["etag"]}
    )
    assert saved.status_code == 200, saved.text
    assert (saved.json()["version"], saved.json()["awaiting_reader"]) == (2, False)
    assert rita.get("/api/worklist", params={"status": "unread"}).json()["total"] == 0
    assert rita.get("/api/worklist", params={"status": "preliminary"}).json()["total"] == 1


def test_stale_save_shows_their_changes_field_by_field_and_writes_nothing(
    app: Any, db: Database
) -> None:
    rita, alice = signed_in(app, "rita"), signed_in(app, "alice")
    base = created(rita, study())
    theirs = copy.deepcopy(base["study"])
    theirs["stages"]["peak"]["wall_motion"]["7"] = 3
    answer = alice.put(
        "/api/studies/DEMO-0001", json={"study": theirs}, headers={"if-match": base["etag"]}
    )
    assert answer.status_code == 200
    mine = copy.deepcopy(base["study"])
    mine["indication"] = "Breathless on exertion."
    mine["stages"]["peak"]["wall_motion"]["7"] = 2
    stale = rita.put(
        "/api/studies/DEMO-0001", json={"study": mine}, headers={"if-match": base["etag"]}
    )
    assert stale.status_code == 412  # RFC 9110 §13.1.1
    body = stale.json()
    assert "nothing was written" in body["detail"]
    assert (body["base_version"], body["current_version"], body["changed_by"]) == (1, 2, "alice")
    assert stale.headers["etag"] == body["etag"] == answer.headers["etag"]
    changes = {c["path"]: c for c in body["changes"]}
    assert set(changes) == {"indication", "stages.peak.wall_motion.7"}
    assert changes["stages.peak.wall_motion.7"] | {} == changes["stages.peak.wall_motion.7"]
    assert (
        changes["stages.peak.wall_motion.7"]["theirs"],
        changes["stages.peak.wall_motion.7"]["mine"],
    ) == (3, 2)
    assert changes["stages.peak.wall_motion.7"]["conflict"] is True
    assert changes["indication"]["conflict"] is False
    assert versions_of(db, "DEMO-0001") == [1, 2]  # nothing written
    # "re-apply mine on top": theirs with my changes, saved with the current ETag
    merged = conflicts.mine_on_top(base["study"], body["current"], mine)
    assert body["merged"] == merged  # the server offers the same merge
    again = rita.put(
        "/api/studies/DEMO-0001", json={"study": merged}, headers={"if-match": body["etag"]}
    )
    assert again.status_code == 200, again.text
    final = again.json()["study"]
    assert final["indication"] == "Breathless on exertion."
    assert final["stages"]["peak"]["wall_motion"]["7"] == 2


def test_save_without_if_match_is_428_and_on_a_signed_study_409(app: Any, db: Database) -> None:
    rita = signed_in(app, "rita")
    first = created(rita, study())
    missing = rita.put("/api/studies/DEMO-0001", json={"study": first["study"]})
    assert missing.status_code == 428  # RFC 6585 §3
    assert missing.json()["etag"] == first["etag"]
    unnamed = rita.post(
        "/api/studies/DEMO-0001/sign", json={"password": PASSWORD}
    )  # bad: no If-Match
    assert unnamed.status_code == 428
    early = rita.post(
        "/api/studies/DEMO-0001/addendum",
        json={"text": "t", "password": PASSWORD},
        headers={"if-match": first["etag"]},
    )  # bad: nothing signed to add to
    assert early.status_code == 409 and "not signed yet" in early.text
    signed = rita.post(
        "/api/studies/DEMO-0001/sign",
        json={"password": PASSWORD},
        headers={"if-match": first["etag"]},
    )
    assert signed.status_code == 200, signed.text
    changed = copy.deepcopy(first["study"])
    changed["indication"] = "changed after signing"
    refused = rita.put(
        "/api/studies/DEMO-0001", json={"study": changed}, headers={"if-match": first["etag"]}
    )
    assert refused.status_code == 409
    assert "use Amend or Addendum" in refused.json()["detail"]
    twice = rita.post(
        "/api/studies/DEMO-0001/sign",
        json={"password": PASSWORD},
        headers={"if-match": first["etag"]},
    )  # bad: already signed
    assert twice.status_code == 409 and "never signed again" in twice.text
    assert versions_of(db, "DEMO-0001") == [1]


def test_sign_in_the_page_and_the_pdf_is_the_stored_one(
    app: Any, db: Database, tmp_path: Path
) -> None:
    rita = signed_in(app, "rita")
    first = created(rita, study())
    signed = rita.post(
        "/api/studies/DEMO-0001/sign",
        json={"password": PASSWORD, "meaning": "reviewed and approved"},
        headers={"if-match": first["etag"]},
    )
    assert signed.status_code == 200, signed.text
    answer = signed.json()
    assert (answer["version"], answer["status"]) == (1, "final")
    pdf = rita.get(answer["pdf"])
    assert pdf.status_code == 200 and pdf.headers["content-type"] == "application/pdf"
    shown = history.show(db, "DEMO-0001", 1, tmp_path / "out")
    assert pdf.content == shown[2].read_bytes()  # byte for byte, as `store show` writes it
    opened = rita.get("/api/studies/DEMO-0001").json()
    assert opened["read_only"] is True
    assert opened["signature"]["meaning"] == "reviewed and approved"
    assert opened["signature"]["signer_name"] == "Rita Example"
    assert rita.get("/api/worklist", params={"status": "signed"}).json()["total"] == 1
    events = rita.get("/api/studies/DEMO-0001/history").json()["events"]
    assert [(e["action"], e["actor"], e["origin"]) for e in events] == [
        ("save", "rita", "web"),
        ("sign", "rita", "web"),
    ]


def test_wrong_signing_password_counts_towards_the_lockout(app: Any, db: Database) -> None:
    rita = signed_in(app, "rita")
    first = created(rita, study())
    limit = default_settings().lockout_failures
    for _ in range(limit):
        wrong = rita.post(
            "/api/studies/DEMO-0001/sign",
            json={"password": "not the password"},  # bad: not rita's password
            headers={"if-match": first["etag"]},
        )
        assert wrong.status_code == 403
        assert "wrong password" in wrong.json()["detail"]
    assert "now locked" in wrong.json()["detail"]
    # locking ends the user's sessions: the page's next request is signed out
    assert rita.get("/api/worklist").status_code == 401
    assert versions_of(db, "DEMO-0001") == [1]
    assert history.history(db, "DEMO-0001")["versions"][0]["signature"] is None
    # 21 CFR 11.300: the account is locked now; signing in again is refused
    again = TestClient(app, base_url="http://127.0.0.1").post(
        "/api/session", json={"user": "rita", "password": PASSWORD}
    )
    assert again.status_code == 401
    with db.read() as session:
        actions = [e.action for e in session.scalars(select(EventRow).order_by(EventRow.seq))]
    assert actions.count("sign_failed") == limit and "user_locked" in actions


def test_a_sonographer_cannot_sign_amend_or_add_an_addendum(app: Any) -> None:
    sam = signed_in(app, "sam")
    first = created(sam, study())
    for route, body in (
        ("sign", {"password": PASSWORD}),
        ("amend", {"study": first["study"], "reason": "r", "password": PASSWORD}),
        ("addendum", {"text": "t", "password": PASSWORD}),
    ):
        answer = sam.post(
            f"/api/studies/DEMO-0001/{route}", json=body, headers={"if-match": first["etag"]}
        )
        assert answer.status_code == 403, route


def test_amend_needs_a_reason_and_addendum_appends(app: Any, db: Database) -> None:
    rita = signed_in(app, "rita")
    first = created(rita, study())
    rita.post(
        "/api/studies/DEMO-0001/sign",
        json={"password": PASSWORD},
        headers={"if-match": first["etag"]},
    )
    changed = copy.deepcopy(first["study"])
    changed["indication"] = "Chest pain at rest."
    no_reason = rita.post(
        "/api/studies/DEMO-0001/amend",
        json={"study": changed, "password": PASSWORD},  # bad: no reason
        headers={"if-match": first["etag"]},
    )
    assert no_reason.status_code == 422
    assert "reason" in no_reason.text
    blank = rita.post(
        "/api/studies/DEMO-0001/amend",
        json={"study": changed, "reason": "   ", "password": PASSWORD},  # bad: blank reason
        headers={"if-match": first["etag"]},
    )
    assert blank.status_code == 422 and "must not be blank" in blank.text
    amended = rita.post(
        "/api/studies/DEMO-0001/amend",
        json={"study": changed, "reason": "indication corrected", "password": PASSWORD},
        headers={"if-match": first["etag"]},
    )
    assert amended.status_code == 200, amended.text
    assert (amended.json()["version"], amended.json()["status"]) == (2, "amended")
    stale = rita.post(
        "/api/studies/DEMO-0001/addendum",
        json={"text": "Reviewed with the referrer.", "password": PASSWORD},
        headers={"if-match": first["etag"]},  # bad: version 1 is superseded
    )
    assert stale.status_code == 412
    added = rita.post(
        "/api/studies/DEMO-0001/addendum",
        json={"text": "Reviewed with the referrer.", "password": PASSWORD},
        headers={"if-match": amended.json()["etag"]},
    )
    assert added.status_code == 200, added.text
    assert (added.json()["version"], added.json()["status"]) == (3, "appended")
    data = history.history(db, "DEMO-0001")
    assert [v["status"] for v in data["versions"]] == ["final", "amended", "appended"]
    assert data["versions"][1]["reason"] == "indication corrected"
    assert rita.get("/api/worklist", params={"status": "amended"}).json()["total"] == 1
    old = rita.get("/api/studies/DEMO-0001/versions/1").json()
    assert (old["version"], old["latest_version"], old["status"]) == (1, 3, "final")


def test_assignment_by_reader_or_admin_only_to_a_reader(app: Any) -> None:
    sam, ada, rita = signed_in(app, "sam"), signed_in(app, "ada"), signed_in(app, "rita")
    created(sam, study())
    route = "/api/studies/DEMO-0001/assignment"
    assert sam.put(route, json={"reader": "rita"}).status_code == 403  # a sonographer
    bad = ada.put(route, json={"reader": "sam"})  # bad: sam is no reader
    assert bad.status_code == 422 and "reader role" in bad.text
    done = ada.put(route, json={"reader": "rita"})
    assert done.status_code == 200 and done.json() == {
        "study_id": "DEMO-0001",
        "reader": "rita",
        "before": None,
    }
    mine = rita.get("/api/worklist", params={"reader": "rita"}).json()
    assert [r["assigned_reader"] for r in mine["rows"]] == ["rita"]
    events = rita.get("/api/studies/DEMO-0001/history").json()["events"]
    assert ("assign", "ada") in [(e["action"], e["actor"]) for e in events]


def test_earlier_studies_and_comparison_with_the_prior_signed_study(app: Any) -> None:
    rita = signed_in(app, "rita")
    old = study("OLD-1", study__date="2025-03-01")
    old["stages"]["peak"]["wall_motion"] = {str(n): 1 for n in range(1, 18)}
    first = created(rita, old)
    rita.post(
        "/api/studies/OLD-1/sign", json={"password": PASSWORD}, headers={"if-match": first["etag"]}
    )
    new = study("NEW-1", study__date="2026-03-01")
    new["stages"]["peak"]["wall_motion"] = {
        str(n): (3 if n in (7, 13) else 1) for n in range(1, 18)
    }
    opened = created(rita, new)
    assert [(e["study_id"], e["status"]) for e in opened["earlier"]] == [("OLD-1", "signed")]
    # the oracle: reporting.comparison on the two analyses directly (the prior as signed, final)
    before = analyze(study_from_data(old | {"study": old["study"] | {"report_status": "final"}}))
    now = analyze(study_from_data(new | {"study": new["study"] | {"report_status": "preliminary"}}))
    expected = record_dict(with_comparison(now, before, location="prior"))["comparison"]
    assert opened["comparison"] == expected
    assert expected["prior_study_id"] == "OLD-1"
    live = rita.post("/api/analyze", json=new)
    assert live.status_code == 200, live.text
    assert live.json()["record"]["comparison"] == expected
    # a study with no earlier one, and the older study itself, have none
    assert rita.get("/api/studies/OLD-1").json()["earlier"] == []


@pytest.mark.parametrize(
    ("params", "why"),
    [
        ({"status": "done"}, "not a worklist status"),
        ({"date_from": "yesterday"}, "not a date"),
        ({"limit": "0"}, "an empty page"),
        ({"limit": "100000"}, "more than a page holds"),
    ],
    ids=["status", "date", "zero-limit", "huge-limit"],
)
def test_bad_worklist_filters_are_422(app: Any, params: dict[str, str], why: str) -> None:
    answer = signed_in(app, "rita").get("/api/worklist", params=params)  # bad: see why
    assert answer.status_code == 422, why


def test_missing_study_and_version_are_404(app: Any) -> None:
    rita = signed_in(app, "rita")
    assert rita.get("/api/studies/NOPE-1").status_code == 404
    created(rita, study())
    assert rita.get("/api/studies/DEMO-0001/versions/9").status_code == 404
    unsigned = rita.get("/api/studies/DEMO-0001/pdf")
    assert unsigned.status_code == 404 and "not signed" in unsigned.text
    assert rita.post("/api/studies", json={"study": study()}).status_code == 409  # id taken


def test_the_lab_settings_are_the_ones_analyses_and_signatures_use(
    db: Database, tmp_path: Path
) -> None:
    # A lab that sets the Tanaka formula (Tanaka H et al., JACC 2001;37:153: 208 − 0.7 × age)
    # gets it in the live analysis, the study view and the signed record, not the default (Fox).
    lab = default_settings().model_copy(update={"heart_rate_formula": HeartRateFormula.TANAKA})
    app = create_lab_app(db, settings=lab)
    rita = signed_in(app, "rita")
    data = study()
    live = rita.post("/api/analyze", json=data)
    assert live.status_code == 200, live.text
    stress = live.json()["record"]["stress"]
    assert stress["heart_rate_formula"] == "tanaka"
    assert stress["age_predicted_max_hr_bpm"] == pytest.approx(208 - 0.7 * stress["age_years"])
    first = created(rita, data)
    signed = rita.post(
        "/api/studies/DEMO-0001/sign",
        json={"password": PASSWORD},
        headers={"if-match": first["etag"]},
    )
    assert signed.status_code == 200, signed.text
    record = json.loads(history.show(db, "DEMO-0001", 1, tmp_path)[1].read_text())
    assert record["stress"]["heart_rate_formula"] == "tanaka"
    assert record["stress"]["age_predicted_max_hr_bpm"] == stress["age_predicted_max_hr_bpm"]
