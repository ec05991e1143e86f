"""The entry server's reader routes: phrases, confirming the impression, the stale mark, the new
study fields and their located refusals (FastAPI's test client)."""

from __future__ import annotations

import re
import warnings
from pathlib import Path
from typing import Any

import pytest
import yaml
from click.testing import CliRunner
from conftest import NORMAL_17, study_dict

from reporting.analysis import analyze
from reporting.cli import main
from reporting.impression import findings_sha256
from reporting.load import study_from_data
from reporting.model import Protocol
from reporting.phrases import SLOTS, load_library
from reporting.procedure import Arrhythmia, BaselineEcg, Complication, ImageQuality, StopReason

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    from fastapi.testclient import TestClient

from reporting.web import create_app
from reporting.web.form import protocol_views

PEAK_LAD = "111111 221111 2311 3"  # hypokinetic 7, 8, 13; akinetic 14 and the apex: LAD ischaemia
PEAK_LAD_AND_RCA = "111211 221211 2311 3"  # as above, plus the inferior wall (4, 10): RCA too


def lad_study(peak: str = PEAK_LAD, **changes: Any) -> dict[str, Any]:
    return study_dict(
        stages={
            "rest": {"heart_rate_bpm": 70, "systolic_bp_mmhg": 120, "wall_motion": NORMAL_17},
            "peak": {"heart_rate_bpm": 150, "systolic_bp_mmhg": 150, "wall_motion": peak},
        },
        **changes,
    )


@pytest.fixture
def studies(tmp_path: Path) -> Path:
    return tmp_path / "studies"


@pytest.fixture
def client(studies: Path) -> TestClient:
    return TestClient(create_app(studies), base_url="http://127.0.0.1")


def problems(response: Any) -> list[str]:
    return [f"{p['location']}: {p['problem']}" for p in response.json()["problems"]]


# --- phrases -----------------------------------------------------------------------------------


def test_phrase_listing_is_the_built_in_library_with_every_slot(client: TestClient) -> None:
    answer = client.get("/api/phrases").json()
    assert answer["source"] == "built-in"
    assert set(answer["slots"]) == set(SLOTS)
    assert ".rec-angio" in [p["code"] for p in answer["phrases"]]


def test_lab_phrase_file_replaces_the_built_in_set(tmp_path: Path) -> None:
    path = tmp_path / "lab.yaml"
    path.write_text(
        "phrases:\n  - {code: .lab, title: Lab, text: 'Ischaemia, {territory} territory.'}\n",
        encoding="utf-8",
    )
    app = create_app(tmp_path / "s", phrases=load_library(path), phrases_source=path.name)
    client = TestClient(app, base_url="http://127.0.0.1")
    assert [p["code"] for p in client.get("/api/phrases").json()["phrases"]] == [".lab"]
    filled = client.post("/api/analyze", json=lad_study()).json()["phrases"]
    # oracle: the territory the record itself names
    record = analyze(study_from_data(lad_study()))
    territory = record.conclusion.ischemic_territories[0].value
    assert filled == [
        {
            "code": ".lab",
            "title": "Lab",
            "field": "either",
            "text": f"Ischaemia, {territory} territory.",
            "missing": [],
        }
    ]


def test_analyze_fills_slots_of_every_phrase(client: TestClient) -> None:
    answer = client.post("/api/analyze", json=lad_study(peak=PEAK_LAD_AND_RCA)).json()
    by_code = {p["code"]: p for p in answer["phrases"]}
    territories = answer["record"]["conclusion"]["ischemic_territories"]
    assert len(territories) == 2
    assert f"{territories[0]} and {territories[1]}" in by_code[".rec-angio"]["text"]
    peak = answer["record"]["wmsi"]["peak"]
    assert f"{peak:.2f}" in by_code[".normal"]["text"]
    for phrase in answer["phrases"]:
        assert not re.search(r"\{[a-z_]+\}", phrase["text"]), phrase


def test_serve_refuses_a_phrase_file_with_an_unknown_slot(tmp_path: Path) -> None:
    path = tmp_path / "lab.yaml"
    # {wmsi_max} is no slot: refused before the server starts, located at the phrase
    path.write_text("phrases:\n  - {code: .a, title: A, text: 'WMSI {wmsi_max}'}\n", "utf-8")
    result = CliRunner().invoke(
        main, ["serve", "--studies", str(tmp_path / "s"), "--phrases", str(path), "--port", "1"]
    )
    assert result.exit_code == 1
    assert f"Error: {path}: phrases.0.text: unknown slot {{wmsi_max}}" in result.output
    assert "Traceback" not in result.output


# --- confirming the impression ---------------------------------------------------------------------


def test_confirm_answers_the_library_hash_of_the_findings(client: TestClient) -> None:
    body = lad_study(impression="LAD ischaemia.", recommendations="Angiography.")
    answer = client.post("/api/impression/confirm", json=body)
    assert answer.status_code == 200, answer.text
    # oracle: reporting.impression computes the hash; the route must not compute its own
    expected = findings_sha256(analyze(study_from_data(body)))
    assert answer.json()["impression_basis_sha256"] == expected
    assert answer.json()["impression_status"] == "current"
    assert answer.json()["computed_impression"].startswith("Positive for inducible ischaemia")


@pytest.mark.parametrize(
    ("changes", "where", "problem"),
    [
        # nothing written: there is nothing to confirm
        ({}, "study: impression", "write or accept an impression"),
        # only blanks count as nothing written
        ({"impression": "   "}, "study: impression", "write or accept an impression"),
        # a study the analysis refuses cannot be confirmed
        (
            {"impression": "x", "segment_model": 19},
            "study: segment_model",
            "",
        ),
    ],
    ids=["no-impression", "blank-impression", "bad-study"],
)
def test_confirm_refuses_with_a_located_problem(
    client: TestClient, changes: dict[str, Any], where: str, problem: str
) -> None:
    answer = client.post("/api/impression/confirm", json=lad_study(**changes))
    assert answer.status_code == 422
    assert any(p.startswith(f"{where}: {problem}") for p in problems(answer)), problems(answer)


def test_confirm_refuses_a_body_that_is_not_json(client: TestClient) -> None:
    # the same body checks as every other route
    answer = client.post(
        "/api/impression/confirm",
        content=b"{not json",
        headers={"content-type": "application/json"},
    )
    assert answer.status_code == 422
    assert problems(answer)[0].startswith("study")


def test_saved_impression_turns_stale_when_a_score_changes_and_current_when_confirmed(
    client: TestClient, studies: Path
) -> None:
    body = lad_study(impression="LAD ischaemia, my words.")
    confirmed = client.post("/api/impression/confirm", json=body).json()
    body |= {
        "impression_basis_sha256": confirmed["impression_basis_sha256"],
        "computed_impression": confirmed["computed_impression"],
    }
    saved = client.put("/api/studies/T-0001", json=body)
    assert saved.status_code == 200, saved.text
    stored = yaml.safe_load((studies / "T-0001.yaml").read_text("utf-8"))
    assert stored["impression"] == "LAD ischaemia, my words."
    assert stored["impression_basis_sha256"] == confirmed["impression_basis_sha256"]
    assert client.post("/api/analyze", json=body).json()["record"]["impression_status"] == "current"
    changed = body | lad_study(peak=PEAK_LAD_AND_RCA) | {"impression": body["impression"]}
    changed["impression_basis_sha256"] = body["impression_basis_sha256"]
    assert (
        client.post("/api/analyze", json=changed).json()["record"]["impression_status"] == "stale"
    )
    again = client.post("/api/impression/confirm", json=changed).json()
    assert again["impression_basis_sha256"] != body["impression_basis_sha256"]
    changed["impression_basis_sha256"] = again["impression_basis_sha256"]
    assert (
        client.post("/api/analyze", json=changed).json()["record"]["impression_status"] == "current"
    )


def test_kept_notes_round_trip(client: TestClient, studies: Path) -> None:
    body = lad_study(kept_notes=["not_visualised"])
    assert client.put("/api/studies/T-0001", json=body).status_code == 200
    assert client.get("/api/studies/T-0001").json()["study"]["kept_notes"] == ["not_visualised"]
    # a kind of note that does not exist
    bad = client.put(
        "/api/studies/T-0002",
        json=lad_study(kept_notes=["gossip"]) | {"study": {"id": "T-0002", "date": "2026-10-14"}},
    )
    assert bad.status_code == 422
    assert any(p.startswith("study: kept_notes.0: ") for p in problems(bad)), problems(bad)


# --- the new study fields ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("order", "where", "problem"),
    [
        # DICOM Accession Number (SH) holds 16 characters: refused, never cut
        ({"accession_number": "A" * 17}, "order.accession_number", "is 17 characters"),
        # HL7 ORC-2 holds 22
        ({"placer_order_number": "P" * 23}, "order.placer_order_number", "is 23 characters"),
        # a leading zero in a UID component is not allowed
        ({"study_instance_uid": "1.2.03"}, "order.study_instance_uid", "is not a DICOM UID"),
        # a clinician needs a name (the page places "required field" problems at the field)
        ({"performing": {"id": "S1"}}, "order.performing", "required field 'name' is missing"),
    ],
    ids=["accession-17", "placer-23", "uid-leading-zero", "clinician-without-name"],
)
def test_order_fields_are_refused_where_they_are(
    client: TestClient, order: dict[str, Any], where: str, problem: str
) -> None:
    answer = client.post("/api/analyze", json=lad_study(order=order))
    assert answer.status_code == 422
    found = {p["path"]: p["problem"] for p in answer.json()["problems"]}
    assert where in found and problem in found[where], found


def test_procedure_fields_are_saved_as_entered(client: TestClient, studies: Path) -> None:
    procedure = {
        "baseline_rhythm": "sinus",
        "baseline_ecg": ["left_bundle_branch_block"],
        "medications": {"beta_blocker": "withheld"},
        "stop_reasons": ["target_heart_rate", "angina"],
        "complications": ["none"],
        "arrhythmias": ["ventricular_ectopy"],
    }
    body = lad_study(
        procedure=procedure,
        referral_question="Ischaemia?",
        other_findings="Mild mitral regurgitation.",
    )
    body["stages"]["peak"]["image_quality"] = "adequate"
    assert client.put("/api/studies/T-0001", json=body).status_code == 200
    stored = client.get("/api/studies/T-0001").json()["study"]
    assert stored["procedure"] == procedure
    assert stored["stages"]["peak"]["image_quality"] == "adequate"
    assert stored["referral_question"] == "Ischaemia?"


def test_vasodilator_dose_in_the_wrong_unit_is_located(client: TestClient) -> None:
    # regadenoson is a bolus in mg, not an infusion rate
    body = lad_study(
        protocol="vasodilator", vasodilator={"agent": "regadenoson", "dose_ug_kg_min": 140}
    )
    answer = client.post("/api/analyze", json=body)
    assert answer.status_code == 422
    assert any("give dose_mg, not dose_ug_kg_min" in p for p in problems(answer)), problems(answer)


def test_page_offers_every_model_choice(client: TestClient) -> None:
    html = client.get("/").text
    for enum in (StopReason, Complication, Arrhythmia, BaselineEcg):
        for member in enum:
            assert f'type="checkbox" value="{member.value}"' in html, member
    for quality in ImageQuality:
        assert f'<option value="{quality.value}">' in html
    for path in (
        "order.accession_number",
        "order.study_instance_uid",
        "order.interpreting.name",
        "exercise.hr_recovery_1min_bpm",
        "vasodilator.agent",
        "referral_question",
        "other_findings",
        "impression",
        "recommendations",
    ):
        assert f'data-path="{path}"' in html, path


def test_protocol_views_show_only_the_protocol_stages_and_fields() -> None:
    views = protocol_views()
    for exercise in (Protocol.TREADMILL, Protocol.BICYCLE):
        view = views[exercise.value]
        assert view["stages"]["low_dose"] == "Low workload"
        assert view["stages"]["peak"] == "Peak exercise"
        assert "atropine_mg" not in view["stage_fields"]
        assert "dose_ug_kg_min" not in view["stage_fields"]
        assert "exercise" in view["blocks"]
    dobutamine = views[Protocol.DOBUTAMINE.value]
    assert dobutamine["stages"]["low_dose"] == "Low dose"
    assert {"atropine_mg", "dose_ug_kg_min"} <= set(dobutamine["stage_fields"])
    vasodilator = views[Protocol.VASODILATOR.value]
    assert "low_dose" not in vasodilator["stages"] and vasodilator["blocks"] == ["vasodilator"]
    assert set(views) == {p.value for p in Protocol} | {""}


def test_lab_setting_names_the_phrase_file(tmp_path: Path) -> None:
    lab = tmp_path / "lab"
    lab.mkdir()
    (lab / "settings.yaml").write_text("phrases_file: our-phrases.yaml\n", "utf-8")
    # the phrase file beside the settings file holds an unknown slot: the error names it, so the
    # setting was followed relative to the settings file
    (lab / "our-phrases.yaml").write_text(
        "phrases:\n  - {code: .a, title: A, text: '{nope}'}\n", "utf-8"
    )
    result = CliRunner().invoke(
        main,
        ["serve", "--studies", str(tmp_path / "s"), "--settings", str(lab / "settings.yaml")],
    )
    assert result.exit_code == 1
    assert (
        f"Error: {lab / 'our-phrases.yaml'}: phrases.0.text: unknown slot {{nope}}" in result.output
    )
