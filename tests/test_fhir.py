"""FHIR R4 transaction Bundle, validated with the fhir.resources R4B models (invented studies).

the published standard: the package's default models are R5, so the R4B ones are used; a transaction (fullUrl
and request per entry) is what a server accepts; the report is a conditional update on its
identifier; Attachment.hash is base64 SHA-1; R4 DiagnosticReport has no note.
"""

from __future__ import annotations

import base64
import hashlib
import json
import uuid
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from fhir.resources.R4B.bundle import Bundle
from interop_cases import CORRECTED, DEMO, FINAL, ORDER, PDF, SIGNER, UNSIGNED, ordered

from reporting.analysis import analyze, analyze_file
from reporting.cli import main
from reporting.codes import code
from reporting.deidentify import deidentify
from reporting.demo import demo_study_names
from reporting.export import fhir
from reporting.interop.release import Release
from reporting.interop.words import conclusion_text, headline
from reporting.load import study_from_data
from reporting.model import Stage
from reporting.results import Analysis
from reporting.settings import default_settings

KEY = b"an invented key for tests only, 32+ bytes"
DCM = "http://dicom.nema.org/resources/ontology/DCM"
SCT = "http://snomed.info/sct"
LOINC = "http://loinc.org"
LAB = default_settings().model_copy(
    update={
        "lab_code_system_uri": "https://echo.larkspur-valley.org/fhir/CodeSystem/stress-echo",
        "lab_identifier_system_uri": "https://echo.larkspur-valley.org/fhir/id",
    }
)


@pytest.fixture(scope="module")
def analyses() -> list[Analysis]:
    return [analyze_file(DEMO / name) for name in demo_study_names()]


def resources(bundle: dict[str, Any], kind: str) -> list[dict[str, Any]]:
    return [e["resource"] for e in bundle["entry"] if e["resource"]["resourceType"] == kind]


def by_url(bundle: dict[str, Any]) -> dict[str, dict[str, Any]]:
    return {e["fullUrl"]: e["resource"] for e in bundle["entry"]}


def codings(concept: dict[str, Any], system: str) -> list[str]:
    return [c["code"] for c in concept.get("coding", []) if c["system"] == system]


def stage_of(observation: dict[str, Any]) -> Stage:
    """The stage, read back only from the Protocol Stage component (DCM 109055)."""
    (component,) = [
        c
        for c in observation["component"]
        if codings(c["code"], DCM) == [code("protocol_stage").value]
    ]
    (value,) = codings(component["valueCodeableConcept"], SCT)
    return next(s for s in Stage if code(f"stage.{s.value}").value == value)


def with_model(model: int) -> Analysis:
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
    }
    return analyze(study_from_data(data))


@pytest.mark.parametrize("deidentified", [False, True], ids=["identified", "deidentified"])
def test_every_demo_bundle_is_a_valid_r4_transaction(
    analyses: list[Analysis], deidentified: bool
) -> None:
    for analysis in analyses:
        a = deidentify(analysis, KEY) if deidentified else analysis
        data = fhir.bundle(a, pdf=PDF)
        Bundle.model_validate(data)  # fhir.resources R4B: raises on any structural error
        assert data["type"] == "transaction"
        for entry in data["entry"]:
            assert entry["fullUrl"] == f"urn:uuid:{entry['resource']['id']}"
            assert uuid.UUID(entry["resource"]["id"]).version == 5
            assert entry["request"]["method"] in ("POST", "PUT")
        kinds = {e["resource"]["resourceType"] for e in data["entry"]}
        assert ("Patient" in kinds) is not deidentified


def test_report_and_observations_are_conditional_updates_on_their_identifiers() -> None:
    for settings in (default_settings(), LAB):
        data = fhir.bundle(ordered(), pdf=PDF, settings=settings)
        Bundle.model_validate(data)
        values = []
        for entry in data["entry"]:
            resource, request = entry["resource"], entry["request"]
            if resource["resourceType"] in ("DiagnosticReport", "Observation"):
                ident = resource["identifier"][0]
                token = (
                    f"{ident['system']}|{ident['value']}" if "system" in ident else ident["value"]
                )
                assert request == {
                    "method": "PUT",
                    "url": f"{resource['resourceType']}?identifier={token}",
                }
                values.append((ident.get("system"), ident["value"]))
        assert len(values) == len(set(values))  # one identifier per resource
    report = data["entry"][0]
    assert report["request"]["url"] == (
        "DiagnosticReport?identifier=https://echo.larkspur-valley.org/fhir/id/diagnostic-report|DEMO-0002"
    )


def test_practitioners_service_request_and_patient_are_linked() -> None:
    data = fhir.bundle(ordered(), pdf=PDF)
    Bundle.model_validate(data)
    urls = by_url(data)
    report = resources(data, "DiagnosticReport")[0]
    performer = urls[report["performer"][0]["reference"]]
    reader = urls[report["resultsInterpreter"][0]["reference"]]
    assert performer["resourceType"] == reader["resourceType"] == "Practitioner"
    assert performer["name"][0]["text"] == ORDER["performing"]["name"]
    assert reader["name"][0]["text"] == ORDER["interpreting"]["name"]
    assert reader["identifier"][0]["value"] == ORDER["interpreting"]["id"]
    order = urls[report["basedOn"][0]["reference"]]
    assert order["resourceType"] == "ServiceRequest"
    types = {i["type"]["coding"][0]["code"]: i["value"] for i in order["identifier"]}
    # HL7 table 0203 identifier types: placer, filler, accession
    assert types == {
        "PLAC": ORDER["placer_order_number"],
        "FILL": ORDER["filler_order_number"],
        "ACSN": ORDER["accession_number"],
    }
    assert urls[report["subject"]["reference"]]["resourceType"] == "Patient"
    for obs in resources(data, "Observation"):
        assert obs["performer"] == report["performer"]


@pytest.mark.parametrize(
    ("release", "status"),
    [(UNSIGNED, "preliminary"), (FINAL, "final"), (CORRECTED, "corrected")],
    ids=["unsigned", "final", "corrected"],
)
def test_status_comes_from_the_release(release: Release, status: str) -> None:
    # FHIR R4 DiagnosticReport.status codes (the published standard)
    data = fhir.bundle(ordered(), pdf=PDF, release=release)
    Bundle.model_validate(data)
    report = resources(data, "DiagnosticReport")[0]
    assert report["status"] == status
    assert {o["status"] for o in resources(data, "Observation")} == {status}
    if release.signer is not None:
        assert report["issued"] == SIGNER.signed_at.isoformat()
        reader = by_url(data)[report["resultsInterpreter"][0]["reference"]]
        assert reader["name"][0]["text"] == SIGNER.name
    else:
        assert "issued" not in report


def test_conclusion_is_in_the_pdfs_own_words(analyses: list[Analysis]) -> None:
    from reporting.render.narrative import narrative_text

    for a in analyses:
        report = resources(fhir.bundle(a, pdf=PDF), "DiagnosticReport")[0]
        assert report["conclusion"] == conclusion_text(a)
        printed = narrative_text(a)  # the text form the PDF is drawn from
        for paragraph in report["conclusion"].split("\n"):
            assert paragraph in printed
        assert report["conclusion"].startswith(headline(a))


def test_pdf_is_presented_with_its_sha1_hash() -> None:
    report = resources(fhir.bundle(ordered(), pdf=PDF), "DiagnosticReport")[0]
    (form,) = report["presentedForm"]
    assert form["contentType"] == "application/pdf"
    assert base64.b64decode(form["data"]) == PDF
    assert form["size"] == len(PDF)
    assert base64.b64decode(form["hash"]) == hashlib.sha1(PDF).digest()  # FHIR: base64 SHA-1
    assert "presentedForm" not in resources(fhir.bundle(ordered()), "DiagnosticReport")[0]


def test_cautions_are_in_the_narrative_text_not_a_note(analyses: list[Analysis]) -> None:
    for a in analyses:
        report = resources(fhir.bundle(a), "DiagnosticReport")[0]
        assert "note" not in report  # R4 has no DiagnosticReport.note (DICOM PS3.3 and PS3.5)
        div = report["text"]["div"]
        assert div.startswith('<div xmlns="http://www.w3.org/1999/xhtml">')
        for caution in a.cautions:
            assert f"<p>{caution}</p>" in div


def test_every_observation_carries_its_stage_explicitly(analyses: list[Analysis]) -> None:
    for a in analyses:
        data = fhir.bundle(a)
        by_number = {s.number: s for s in a.segments}
        wall = 0
        for obs in resources(data, "Observation"):
            stage = stage_of(obs)
            name = obs["identifier"][0]["value"].split("/")
            assert name[2] == stage.value  # identifier and component agree
            if name[1] == "wall-motion":
                wall += 1
                score = by_number[int(name[3])].wall_motion[stage]
                expected = code("wall_motion.x" if score is None else f"wall_motion.{score}")
                assert codings(
                    obs["valueCodeableConcept"], expected_system(expected.scheme.value)
                ) == [expected.value]
                assert codings(
                    obs["bodySite"],
                    expected_system(code(f"segment.{by_number[int(name[3])].name}").scheme.value),
                )
            if name[1] == "wmsi":
                assert codings(obs["code"], DCM) == ["125202"]  # the published standard
                assert obs["valueQuantity"]["value"] == a.wmsi[stage]
        assert wall == sum(len(s.wall_motion) for s in a.segments)


def expected_system(scheme: str) -> str:
    return {"DCM": DCM, "SCT": SCT, "LN": LOINC}[scheme]


def test_lvef_observations_when_given() -> None:
    data = fhir.bundle(with_model(17))
    lvef = [o for o in resources(data, "Observation") if codings(o["code"], LOINC) == ["10230-1"]]
    assert {stage_of(o): o["valueQuantity"]["value"] for o in lvef} == {
        Stage.REST: 58,
        Stage.PEAK: 49.5,
    }
    assert all(o["valueQuantity"]["code"] == "%" for o in lvef)


def test_sixteen_segment_model_shares_loinc_codes_and_eighteen_uses_snomed() -> None:
    seventeen = [code(f"wall_motion_loinc.{s.name}").value for s in with_model(17).segments]
    sixteen = resources(fhir.bundle(with_model(16)), "Observation")
    assert {c for o in sixteen for c in codings(o["code"], LOINC)} == {*seventeen[:16], "10230-1"}
    eighteen = fhir.bundle(with_model(18))
    Bundle.model_validate(eighteen)
    assert {c for o in resources(eighteen, "Observation") for c in codings(o["code"], LOINC)} == {
        "10230-1"
    }


def test_lab_local_codes_only_with_the_labs_system() -> None:
    plain = resources(fhir.bundle(ordered()), "DiagnosticReport")[0]
    systems = {c["system"] for c in plain["conclusionCode"][0].get("coding", [])}
    assert systems <= {SCT}  # no local system made up
    lab = resources(fhir.bundle(ordered(), settings=LAB), "DiagnosticReport")[0]
    local = [
        c for c in lab["conclusionCode"][0]["coding"] if c["system"] == LAB.lab_code_system_uri
    ]
    assert [c["code"] for c in local] == [ordered().conclusion.status.value]


def test_no_placeholder_system_anywhere(analyses: list[Analysis]) -> None:
    for a in [*analyses, deidentify(analyses[0], KEY), ordered()]:
        text = fhir.bundle_json(a, pdf=PDF, release=FINAL if not a.study.deidentified else UNSIGNED)
        assert ".invalid" not in text and "example.org" not in text


def test_bundle_is_deterministic_and_distinct_per_study(analyses: list[Analysis]) -> None:
    assert fhir.bundle_json(analyses[0]) == fhir.bundle_json(analyses[0])
    first, second = (fhir.bundle(a)["id"] for a in analyses[:2])
    assert first != second
    data = fhir.bundle(analyses[0])
    urls = [e["fullUrl"] for e in data["entry"]]
    assert len(set(urls)) == len(urls)
    report = data["entry"][0]["resource"]
    assert {r["reference"] for r in report["result"]} <= set(urls)


def test_deidentified_bundle_has_year_only_and_a_pseudonymous_subject(
    analyses: list[Analysis],
) -> None:
    a = deidentify(ordered(), KEY)
    text = fhir.bundle_json(a)
    data = json.loads(text)
    report = data["entry"][0]["resource"]
    assert report["effectiveDateTime"] == str(a.study.year)
    assert report["subject"]["identifier"]["value"] == a.patient.id
    original = ordered()
    assert original.study.date is not None
    for identifier in (
        original.study.id,
        original.patient.name,
        original.patient.id,
        original.study.date.isoformat(),
        *(v for v in ORDER.values() if isinstance(v, str)),
        ORDER["performing"]["name"],
        ORDER["interpreting"]["name"],
    ):
        assert identifier and identifier not in text
    assert not resources(data, "Practitioner") and not resources(data, "ServiceRequest")


def test_fhir_command_writes_a_transaction_with_the_pdf(tmp_path: Path) -> None:
    out = tmp_path / "b.json"
    result = CliRunner().invoke(main, ["fhir", str(DEMO / "DEMO-0001.yaml"), "-o", str(out)])
    assert result.exit_code == 0, result.output
    data = json.loads(out.read_text())
    Bundle.model_validate(data)
    report = resources(data, "DiagnosticReport")[0]
    assert data["type"] == "transaction" and report["status"] == "preliminary"
    assert base64.b64decode(report["presentedForm"][0]["data"]).startswith(b"%PDF-")


def test_one_practitioner_entry_when_the_same_clinician_performs_and_interprets() -> None:
    same = ORDER["interpreting"]
    data = fhir.bundle(ordered(performing=same))
    Bundle.model_validate(data)
    (practitioner,) = resources(data, "Practitioner")
    report = resources(data, "DiagnosticReport")[0]
    assert report["performer"][0]["reference"] == report["resultsInterpreter"][0]["reference"]
    assert practitioner["identifier"][0]["value"] == same["id"]


def test_a_signed_record_sent_later_keeps_the_conclusion_it_was_signed_with(
    analyses: list[Analysis],
) -> None:
    # The conclusion a hospital receives is the record's own computed impression: a record read
    # back from the store is never reworded by the wording of a later version.
    from reporting.export.record import record_dict

    written = record_dict(analyses[0]) | {"computed_impression": "Worded at signing.\nSecond."}
    stored = Analysis.model_validate(written)
    report = resources(fhir.bundle(stored, pdf=PDF), "DiagnosticReport")[0]
    assert report["conclusion"] == "Worded at signing.\nSecond."
