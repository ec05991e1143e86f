"""De-identification (HIPAA Safe Harbor, 45 CFR 164.514(b)(2)) and its byte scan (invented people)."""

from __future__ import annotations

import datetime as dt
import json
import typing
from pathlib import Path
from typing import Any

import jsonschema  # type: ignore[import-untyped, unused-ignore]
import pytest
from pydantic import BaseModel

from reporting.analysis import analyze_file
from reporting.batch import BatchOptions, run_batch
from reporting.batch import study as batch_study
from reporting.deidentify import (
    KEY_ENV,
    DeidentificationKeyError,
    deidentify,
    load_key,
    pseudonymous_patient_id,
    pseudonymous_study_id,
)
from reporting.errors import ReportingError
from reporting.model import Stage
from reporting.results import Analysis

KEY = b"an invented key for tests only, 32+ bytes"
SCHEMA = Path(__file__).parent.parent / "schemas" / "record-1.schema.json"

# One invented study per row; every value in IDENTIFIERS below must vanish from the extract.
PEOPLE = [
    # (study id, date, patient id, name, birth date, age, reader, sonographer, referrer)
    (
        "WH-2026-0001",
        "2026-03-09",
        "MRN-7730021",
        "Peregrine Ashdown-Vale",
        "1951-07-22",
        None,
        "Dr Hesper Kilbride",
        "Ottoline Marsh",
        "Dr Cosmo Ferrante",
    ),
    (
        "WH-2026-0002",
        "2026-04-17",
        "MRN-7730058",
        "Ludovica Tremayne",
        None,
        93,
        "Dr Hesper Kilbride",
        "Ottoline Marsh",
        "Dr Anselm Pryce",
    ),
    (
        "WH-2026-0003",
        "2026-05-28",
        "MRN-7730104",
        "Bartholomew Quenby",
        "1933-11-02",
        None,
        "Dr Fenella Oakhurst",
        "Jory Penhallow",
        "Dr Cosmo Ferrante",
    ),
]
LAB = "Wrenhaven Moor Heart Centre"
TEXT = {
    "indication": "Referred by Dr Imogen Castellan after syncope at Wrenhaven station.",
    "comments": "Discussed with the family of Mr Quenby on ward Heronsgate.",
    "symptoms": "Patient Tremayne reported chest tightness at peak.",
}


def study(row: tuple[Any, ...]) -> dict[str, Any]:
    sid, date, pid, name, born, age, reader, sonographer, referrer = row
    patient: dict[str, Any] = {"id": pid, "name": name, "sex": "female"}
    if born:
        patient["birth_date"] = born
    if age:
        patient["age_years"] = age
    return {
        "schema_version": 1,
        "study": {
            "id": sid,
            "date": date,
            "lab": LAB,
            "reader": reader,
            "sonographer": sonographer,
            "referring_physician": referrer,
            "report_status": "final",
        },
        "patient": patient,
        "indication": TEXT["indication"],
        "protocol": "dobutamine",
        "stages": {
            "rest": {
                "heart_rate_bpm": 70,
                "systolic_bp_mmhg": 120,
                "lvef_percent": 55,
                "wall_motion": "111111 111111 1111 1",
            },
            "low_dose": {"heart_rate_bpm": 90, "wall_motion": "111111 111111 1111 1"},
            "peak": {
                "heart_rate_bpm": 135,
                "systolic_bp_mmhg": 150,
                "wall_motion": "121111 221111 2111 1",
                "perfusion": "121111 221111 2111 1",
                "symptoms": TEXT["symptoms"],
            },
        },
        "contrast": {"agent": f"microspheres batch from {LAB}", "administration": "infusion"},
        "comments": TEXT["comments"],
    }


def date_forms(iso: str) -> list[str]:
    d = dt.date.fromisoformat(iso)
    return [
        iso,
        d.strftime("%Y%m%d"),
        d.strftime("%d/%m/%Y"),
        d.strftime("%m/%d/%Y"),
        d.strftime("%d.%m.%Y"),
        d.strftime("%Y-%m"),
    ]


def identifiers() -> list[str]:
    found: set[str] = {LAB, "Wrenhaven", "Heronsgate", "Castellan", *TEXT.values()}
    for sid, date, pid, name, born, _, reader, sonographer, referrer in PEOPLE:
        found |= {sid, pid, pid.removeprefix("MRN-"), name, reader, sonographer, referrer}
        found |= {
            part
            for who in (name, reader, sonographer, referrer)
            for part in who.split()
            if len(part) > 3
        }
        found |= set(date_forms(date))
        if born:
            found |= set(date_forms(born))
    return sorted(found)


@pytest.fixture(scope="module")
def extract(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("deid")
    indir = root / "in"
    curves = Path(__file__).parent.parent / "reporting" / "data" / "demo" / "DEMO-0006.curves.csv"
    for row in PEOPLE:
        # file names carry identifiers too, as they often do in a lab's folders
        path = indir / row[3].replace(" ", "_") / f"{row[0]}.json"
        path.parent.mkdir(parents=True)
        data = study(row)
        if curves.exists():
            curve_name = f"{row[0]}_{row[3].replace(' ', '_')}_curves.csv"
            (path.parent / curve_name).write_bytes(curves.read_bytes())
            data["perfusion_curves"] = curve_name
        path.write_text(json.dumps(data), encoding="utf-8")
    # a broken study whose error message would quote the name typed into a numeric field
    bad = study(PEOPLE[0])
    bad["study"]["id"] = "WH-2026-0009"
    bad["stages"]["rest"]["heart_rate_bpm"] = "Peregrine Ashdown-Vale"
    (indir / "Peregrine_Ashdown-Vale" / "WH-2026-0009.json").write_text(json.dumps(bad))
    out = root / "out"
    options = BatchOptions(outdir=out, pdf=True, fhir=True, deidentify=True, deid_key=KEY)
    summary = run_batch(indir, options, jobs=2)
    assert (summary.done, summary.failed) == (3, 1), (out / "failures.csv").read_text()
    return out


def test_key_is_required_with_a_clear_error(tmp_path: Path) -> None:
    with pytest.raises(DeidentificationKeyError, match=KEY_ENV):
        load_key(environ={})
    with pytest.raises(DeidentificationKeyError, match="at least 16"):
        load_key(environ={KEY_ENV: "short"})
    with pytest.raises(DeidentificationKeyError, match="cannot read"):
        load_key(tmp_path / "missing.key", environ={})
    assert issubclass(DeidentificationKeyError, ReportingError)
    with pytest.raises(ReportingError, match="key"):
        BatchOptions(outdir=tmp_path, deidentify=True)


def test_key_from_file_wins_over_environment(tmp_path: Path) -> None:
    key_file = tmp_path / "deid.key"
    key_file.write_bytes(KEY + b"\n")
    assert load_key(key_file, environ={KEY_ENV: "x" * 20}) == KEY
    assert load_key(environ={KEY_ENV: "y" * 20}) == b"y" * 20


def test_pseudonyms_are_keyed_stable_and_safe_as_file_names() -> None:
    a = pseudonymous_study_id(KEY, "WH-2026-0001")
    assert a == pseudonymous_study_id(KEY, "WH-2026-0001")  # repeat extracts link
    assert a != pseudonymous_study_id(b"another invented key 123", "WH-2026-0001")
    assert a != pseudonymous_study_id(KEY, "WH-2026-0002")
    assert a.startswith("S-") and len(a) == 26 and a[2:].isalnum()
    assert pseudonymous_patient_id(KEY, "WH-2026-0001") != a  # separated by kind


def test_deidentify_removes_identifiers_and_keeps_findings(tmp_path: Path) -> None:
    path = tmp_path / "s.json"
    path.write_text(json.dumps(study(PEOPLE[0])))
    original = analyze_file(path)
    clean = deidentify(original, KEY)
    assert clean.study.deidentified and not original.study.deidentified
    assert clean.study.date is None and clean.study.year == 2026  # year only (b)(2)(i)(B)
    assert clean.patient.birth_date is None and clean.patient.name is None
    assert clean.patient.id == pseudonymous_patient_id(KEY, "MRN-7730021")
    assert (clean.study.lab, clean.study.reader, clean.study.referring_physician) == (
        None,
        None,
        None,
    )
    assert clean.study.indication is None and clean.study.comments is None
    assert all(h.symptoms is None for h in clean.haemodynamics.values())
    assert clean.patient.age_years == original.patient.age_years  # under 90: kept
    assert clean.wmsi == original.wmsi and clean.conclusion == original.conclusion
    assert deidentify(clean, KEY) == clean


def test_keep_text_keeps_free_text_but_never_names_or_dates(tmp_path: Path) -> None:
    path = tmp_path / "s.json"
    path.write_text(json.dumps(study(PEOPLE[0])))
    clean = deidentify(analyze_file(path), KEY, keep_text=True)
    assert clean.study.indication == TEXT["indication"]
    assert clean.haemodynamics[Stage.PEAK].symptoms == TEXT["symptoms"]
    assert clean.study.reader is None and clean.study.date is None and clean.patient.name is None


def test_ages_over_89_are_grouped_with_everything_that_reveals_them(tmp_path: Path) -> None:
    path = tmp_path / "s.json"
    path.write_text(json.dumps(study(PEOPLE[1])))  # age 93
    original = analyze_file(path)
    assert original.stress.age_predicted_max_hr_bpm == 220 - 93  # Fox 1971 formula, default
    clean = deidentify(original, KEY)
    assert clean.patient.age_years is None and clean.patient.age_group == "90+"
    s = clean.stress
    assert (
        s.age_years,
        s.age_predicted_max_hr_bpm,
        s.target_hr_bpm,
        s.peak_hr_percent_of_predicted,
    ) == (None,) * 4
    assert all(h.hr_percent_of_predicted is None for h in clean.haemodynamics.values())
    assert "93" not in s.adequacy_note and "127" not in s.adequacy_note
    assert s.adequate == original.stress.adequate


def test_curve_file_name_is_removed_from_kinetics() -> None:
    demo = Path(__file__).parent.parent / "reporting" / "data" / "demo" / "DEMO-0006.yaml"
    assert demo.exists(), "DEMO-0006 is the demo study with curves; this check must not be skipped"
    original = analyze_file(demo)
    assert original.kinetics is not None and original.kinetics.source_file
    clean = deidentify(original, KEY)
    text = clean.model_dump_json()
    assert original.kinetics.source_file not in text and "DEMO-0006" not in text
    assert clean.kinetics is not None and clean.kinetics.source_file is None
    assert [s.A_beta for s in clean.kinetics.segments] == [
        s.A_beta for s in original.kinetics.segments
    ]


def test_every_output_byte_is_free_of_every_input_identifier(extract: Path) -> None:
    files = [p for p in sorted(extract.rglob("*")) if p.is_file()]
    assert files
    contents = {p: p.read_bytes() for p in files}
    # Parquet pages are compressed: scan the decoded tables as well.
    import pandas as pd  # type: ignore[import-untyped, unused-ignore]

    for p in extract.glob("*.parquet"):
        contents[p.with_suffix(".decoded")] = pd.read_parquet(p).to_csv().encode()
    for needle in identifiers():
        raw = needle.encode("utf-8")
        for p, data in contents.items():
            assert raw not in data, f"{needle!r} found in {p.name}"
            assert needle not in p.relative_to(extract).as_posix(), f"{needle!r} in a file name"


def test_extract_has_no_pdf_and_names_files_by_hashed_id(extract: Path) -> None:
    assert not list(extract.rglob("*.pdf"))
    expected = {pseudonymous_study_id(KEY, row[0]) for row in PEOPLE}
    assert {p.name.removesuffix(".record.json") for p in extract.glob("*.record.json")} == expected
    assert len(list(extract.glob("*.fhir.json"))) == len(PEOPLE)


def test_extract_records_validate_and_group_old_ages(extract: Path) -> None:
    validator = jsonschema.Draft202012Validator(json.loads(SCHEMA.read_text(encoding="utf-8")))
    records = [json.loads(line) for line in (extract / "registry.ndjson").open(encoding="utf-8")]
    assert len(records) == len(PEOPLE)
    for record in records:
        validator.validate(record)
        assert record["study"]["deidentified"] is True and record["study"]["date"] is None
        assert record["study"]["year"] == 2026
        assert record["patient"]["age_years"] is None or record["patient"]["age_years"] < 90
    assert [r["patient"]["age_group"] for r in records].count("90+") == 2  # aged 93 and 92
    bundles = [json.loads(p.read_text()) for p in extract.glob("*.fhir.json")]
    for b in bundles:
        types_ = [e["resource"]["resourceType"] for e in b["entry"]]
        assert "Patient" not in types_  # the Patient only when not de-identified
        assert b["entry"][0]["resource"]["effectiveDateTime"] == "2026"


def test_failures_in_an_extract_name_no_file_or_value(extract: Path) -> None:
    text = (extract / "failures.csv").read_text(encoding="utf-8")
    assert "F-" in text and "heart_rate_bpm" in text


def test_pdf_writer_is_never_called_when_deidentifying(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    def refuse() -> Any:
        raise AssertionError("a PDF shows identifiers: never written in de-identified mode")

    monkeypatch.setattr(batch_study, "_report_writer", refuse)
    indir = tmp_path / "in"
    indir.mkdir()
    (indir / "a.json").write_text(json.dumps(study(PEOPLE[2])))
    summary = run_batch(indir, BatchOptions(outdir=tmp_path / "out", deidentify=True, deid_key=KEY))
    assert summary.done == 1


def _text_fields(model: type[BaseModel], prefix: str = "") -> list[str]:
    found = []
    for name, info in model.model_fields.items():
        stack: list[Any] = [info.annotation]
        text = False
        while stack:
            t = stack.pop()
            if typing.get_origin(t) is typing.Literal:
                continue
            if isinstance(t, type) and issubclass(t, BaseModel):
                found += _text_fields(t, f"{prefix}{name}.")
            elif typing.get_args(t):
                stack.extend(typing.get_args(t))
            elif t in (str, dt.date, dt.datetime):
                text = True
        if text:
            found.append(prefix + name)
    return found


# Each text or date field of the record and why de-identification treats it as it does.
REVIEWED = {
    "generator": "program version",
    "study.id": "keyed hash",
    "study.date": "removed (year kept)",
    "study.lab": "removed",
    "study.lab_address": "removed",
    "study.reader": "removed",
    "study.sonographer": "removed",
    "study.referring_physician": "removed",
    "study.indication": "removed unless keep_text",
    "study.comments": "removed unless keep_text",
    "study.referral_question": "removed (free text; deidentify builds the header without it)",
    "study.impression": "removed (free text; deidentify builds the header without it)",
    "study.recommendations": "removed (free text; deidentify builds the header without it)",
    "study.other_findings": "removed (free text; deidentify builds the header without it)",
    "study.computed_impression": "removed (the text the reader confirmed; may quote heart-rate "
    "figures that give a withheld age back)",
    "study.impression_basis_sha256": "kept: SHA-256 of coded findings, no identifier",
    "computed_impression": "regenerated from the de-identified record",
    "findings_sha256": "kept: SHA-256 of coded findings, no identifier",
    "patient.id": "keyed hash",
    "patient.name": "removed",
    "patient.birth_date": "removed",
    "territory_map.name": "map name, no patient data",
    "territory_map.title": "map title, no patient data",
    "territory_map.source": "published source",
    "haemodynamics.symptoms": "removed unless keep_text",
    "contrast_agent": "removed unless keep_text",
    "segments.name": "segment name",
    "stress.adequacy_note": "computed; replaced when the age is withheld",
    "stress.hr_recovery_source": "published source or the lab setting's value",
    "conclusion.high_risk_findings.detail": "computed from scores",
    "conclusion.high_risk_findings.source": "published source",
    "notes.text": "computed from scores",
    "notes.source": "published source",
    "cautions": "fixed text",
    "kinetics.model": "model formula",
    "kinetics.source_file": "removed (file names may hold ids)",
    "kinetics.segments.location": "curve file name replaced; stage, segment and lines kept",
    "kinetics.segments.problems.location": "curve file name replaced",
    "kinetics.segments.problems.detail": "computed from the curve values",
    "kinetics.unassigned_curves.location": "curve file name replaced",
    "kinetics.unassigned_curves.detail": "computed from the curve values",
    "kinetics.unassigned_curves.stage": "stage label as written in the curve file",
    "kinetics.cross_checks.text": "computed",
    "kinetics.cross_checks.source": "published source",
    "kinetics.criteria.name": "setting name",
    "kinetics.criteria.source": "published source",
    "conclusion.risk_criteria.detail": "computed from scores and measurements",
    "conclusion.risk_criteria.source": "published source",
}


def test_every_text_field_of_the_record_was_reviewed_for_deidentification() -> None:
    # A new text or date field may carry identifiers: review reporting/deidentify.py, then add it here.
    assert sorted(_text_fields(Analysis)) == sorted(REVIEWED)
