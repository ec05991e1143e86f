"""FHIR R4 export, validated with the fhir.resources R4B models (invented studies)."""

from __future__ import annotations

import base64
import json
import uuid
from pathlib import Path
from typing import Any

import pytest
from fhir.resources.R4B.bundle import Bundle

from reporting.analysis import analyze, analyze_file
from reporting.deidentify import deidentify
from reporting.demo import demo_study_names
from reporting.export import fhir
from reporting.load import study_from_data
from reporting.model import Stage
from reporting.results import Analysis
from reporting.wording import CAUTIONS

DEMO = Path(__file__).parent.parent / "reporting" / "data" / "demo"
KEY = b"an invented key for tests only, 32+ bytes"

# Per-segment wall-motion LOINC codes, HL7 Europe imaging report guide (as listed in FACTS.md §8).
FACTS_LOINC = {
    1: "18121-4", 2: "18122-2", 3: "78192-2", 4: "18123-0", 5: "78193-0", 6: "78194-8",
    7: "18129-7", 8: "18130-5", 9: "78195-5", 10: "18131-3", 11: "78196-3", 12: "78197-1",
    13: "18119-8", 14: "18120-6", 15: "18127-1", 16: "18128-9", 17: "78198-9",
}  # fmt: skip


@pytest.fixture(scope="module")
def analyses() -> list[Analysis]:
    return [analyze_file(DEMO / name) for name in demo_study_names()]


def resources(bundle: dict[str, Any], kind: str) -> list[dict[str, Any]]:
    return [e["resource"] for e in bundle["entry"] if e["resource"]["resourceType"] == kind]


def codes(resource: dict[str, Any], system: str) -> list[str]:
    return [c["code"] for c in resource["code"].get("coding", []) if c["system"] == system]


def stage_of(observation: dict[str, Any]) -> str:
    return str(observation["component"][0]["valueCodeableConcept"]["coding"][0]["code"])


def with_model(model: int, **extra: Any) -> Analysis:
    scores = "1" * (model - 2) + "2x"
    data = {
        "schema_version": 1,
        "study": {"id": f"FHIR-{model}", "date": "2026-11-03"},
        "patient": {"id": "Q-1", "name": "Rosalind Edgecombe", "age_years": 66, "sex": "female"},
        "protocol": "dobutamine",
        "segment_model": model,
        "stages": {
            "rest": {"heart_rate_bpm": 70, "lvef_percent": 58, "wall_motion": scores},
            "peak": {"heart_rate_bpm": 140, "lvef_percent": 49.5, "wall_motion": scores},
        },
        **extra,
    }
    return analyze(study_from_data(data))


def test_loinc_table_matches_the_published_list() -> None:
    # HL7 Europe imaging report guide, per-segment wall motion codes (FACTS.md §8)
    names = [s.name for s in with_model(17).segments]
    assert {n: fhir.WALL_MOTION_LOINC[name] for n, name in enumerate(names, start=1)} == FACTS_LOINC
    assert fhir.LVEF_LOINC == "10230-1"  # LOINC, left ventricular ejection fraction (FACTS.md §8)


@pytest.mark.parametrize("deidentified", [False, True], ids=["identified", "deidentified"])
def test_every_demo_bundle_validates_as_fhir_r4(
    analyses: list[Analysis], deidentified: bool
) -> None:
    for analysis in analyses:
        a = deidentify(analysis, KEY) if deidentified else analysis
        data = fhir.bundle(a, pdf=b"%PDF-1.7 invented")
        Bundle.model_validate(data)  # raises on any structural error
        assert data["type"] == "collection"
        kinds = {e["resource"]["resourceType"] for e in data["entry"]}
        assert ("Patient" in kinds) is not deidentified


def test_one_wall_motion_observation_per_segment_and_stage(analyses: list[Analysis]) -> None:
    for a in analyses:
        data = fhir.bundle(a)
        wall = [
            o
            for o in resources(data, "Observation")
            if any(c.startswith("wall-motion-") for c in codes(o, fhir.LOCAL_OBSERVATION))
        ]
        expected = sum(len(s.wall_motion) for s in a.segments)
        assert len(wall) == expected
        for o in wall:
            number = int(codes(o, fhir.LOCAL_OBSERVATION)[0].rsplit("-", 1)[1])
            assert codes(o, fhir.LOINC) == [FACTS_LOINC[number]]
            score = a.segments[number - 1].wall_motion[Stage(stage_of(o))]
            if score is None:
                assert o["dataAbsentReason"]["text"] == "not visualised"
            else:
                coding = o["valueCodeableConcept"]["coding"][0]
                assert (coding["system"], coding["code"]) == (
                    fhir.LOCAL_WALL_MOTION_SCORE,
                    str(score),
                )


def test_wmsi_per_stage_uses_a_local_code_and_full_precision(analyses: list[Analysis]) -> None:
    for a in analyses:
        data = fhir.bundle(a)
        wmsi = {
            stage_of(o): o["valueQuantity"]["value"]
            for o in resources(data, "Observation")
            if codes(o, fhir.LOCAL_OBSERVATION) == ["wmsi"]
        }
        assert wmsi == {s.value: v for s, v in a.wmsi.items()}
        assert fhir.LOCAL_OBSERVATION.startswith(
            "https://segreport.invalid/"
        )  # local by construction


def test_lvef_observations_when_given() -> None:
    data = fhir.bundle(with_model(17))
    lvef = [o for o in resources(data, "Observation") if codes(o, fhir.LOINC) == ["10230-1"]]
    assert {stage_of(o): o["valueQuantity"]["value"] for o in lvef} == {"rest": 58, "peak": 49.5}
    assert all(o["valueQuantity"]["code"] == "%" for o in lvef)
    no_ef = with_model(
        17, stages={"rest": {"wall_motion": "1" * 17}, "peak": {"wall_motion": "1" * 17}}
    )
    assert not [
        o
        for o in resources(fhir.bundle(no_ef), "Observation")
        if codes(o, fhir.LOINC) == ["10230-1"]
    ]


def test_sixteen_segment_model_shares_codes_and_eighteen_is_local_only() -> None:
    sixteen = resources(fhir.bundle(with_model(16)), "Observation")
    assert {c for o in sixteen for c in codes(o, fhir.LOINC)} == {
        *list(FACTS_LOINC.values())[:16],
        "10230-1",
    }
    eighteen = resources(fhir.bundle(with_model(18)), "Observation")
    assert {c for o in eighteen for c in codes(o, fhir.LOINC)} == {"10230-1"}
    Bundle.model_validate(fhir.bundle(with_model(18)))


def test_report_carries_conclusion_status_and_pdf(analyses: list[Analysis]) -> None:
    a = analyses[0]
    pdf = b"%PDF-1.7 invented bytes"
    report = resources(fhir.bundle(a, pdf=pdf), "DiagnosticReport")[0]
    assert report["status"] == ("final" if a.study.report_status == "final" else "preliminary")
    assert report["conclusion"].startswith(fhir.STATUS_TEXT[a.conclusion.status])
    assert report["conclusionCode"][0]["coding"][0]["system"] == fhir.LOCAL_DIAGNOSTIC_STATUS
    form = report["presentedForm"][0]
    assert form["contentType"] == "application/pdf" and base64.b64decode(form["data"]) == pdf
    assert "presentedForm" not in resources(fhir.bundle(a), "DiagnosticReport")[0]
    assert report["effectiveDateTime"] == a.study.date.isoformat()  # type: ignore[union-attr]


def test_references_resolve_and_ids_are_deterministic_uuids(analyses: list[Analysis]) -> None:
    for a in analyses:
        data = fhir.bundle(a)
        urls = [e["fullUrl"] for e in data["entry"]]
        assert len(set(urls)) == len(urls)
        for e in data["entry"]:
            assert e["fullUrl"] == f"urn:uuid:{e['resource']['id']}"
            assert uuid.UUID(e["resource"]["id"]).version == 5
        report = data["entry"][0]["resource"]
        assert {r["reference"] for r in report["result"]} <= set(urls)
        assert report["subject"]["reference"] in urls
        assert fhir.bundle_json(a) == fhir.bundle_json(a)
    first, second = (fhir.bundle(a)["id"] for a in analyses[:2])
    assert first != second


def test_deidentified_bundle_has_year_only_and_a_pseudonymous_subject(
    analyses: list[Analysis],
) -> None:
    a = deidentify(analyses[0], KEY)
    text = fhir.bundle_json(a)
    data = json.loads(text)
    report = data["entry"][0]["resource"]
    assert report["effectiveDateTime"] == str(a.study.year)
    assert report["subject"]["identifier"]["value"] == a.patient.id
    original = analyses[0]
    assert original.study.date is not None
    for identifier in (
        original.study.id,
        original.patient.name,
        original.patient.id,
        original.study.date.isoformat(),
    ):
        assert identifier and identifier not in text


@pytest.mark.parametrize("deidentified", [False, True], ids=["identified", "deidentified"])
def test_report_carries_the_cautions_after_the_conclusion(
    analyses: list[Analysis], deidentified: bool
) -> None:
    for analysis in analyses:
        a = deidentify(analysis, KEY) if deidentified else analysis
        data = fhir.bundle(a)
        Bundle.model_validate(data)  # still valid R4 (fhir.resources R4B models)
        report = resources(data, "DiagnosticReport")[0]
        conclusion, cautions = report["conclusion"].split("\n\n")
        assert conclusion == fhir.conclusion_text(a)
        assert cautions.splitlines() == list(CAUTIONS)
    for words in ("qualified clinicians", "reviewed by the physician", "product labelling"):
        assert any(words in caution for caution in CAUTIONS)  # what the cautions must say
