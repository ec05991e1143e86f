"""De-identification as an allow-list (issue 11, item 1): every record field and table column is
classified in reporting/data/deidentify_fields.csv; lab territory maps keep none of their own text."""

from __future__ import annotations

import json
import shutil
import subprocess
from pathlib import Path

import pytest
from pydantic import Field

from reporting.analysis import analyze_file
from reporting.deidentify import (
    ALLOW_LIST_PATH,
    LAB_MAP_TITLE,
    Treatment,
    UnclassifiedFieldError,
    allow_list,
    allow_list_problems,
    deidentified_row,
    deidentify,
)
from reporting.export import tables
from reporting.results import Analysis, StudyHeader
from reporting.store.export import VERSION_COLUMNS, VERSIONS_SCOPE

KEY = b"an invented key for tests only, 32+ bytes"
COLUMNS = {
    "studies": list(tables.STUDY_COLUMNS),
    "segments": list(tables.SEGMENT_COLUMNS),
    VERSIONS_SCOPE: list(VERSION_COLUMNS),
}

# Invented lab-map text that must never reach an extract (a lab names maps after whoever drew them).
MAP_TITLE = "Map drawn for Peregrine Ashdown-Vale by Dr Hesper Kilbride"
MAP_SOURCE = "Wrenhaven Moor Heart Centre, ward Heronsgate, 2026-03-09"
MAP_FILE_STEM = "Ashdown-Vale_1122334_map"


def test_every_record_field_and_table_column_is_classified() -> None:
    # Fails with the exact line to add when someone adds a field or column without a classification.
    problems = allow_list_problems(COLUMNS)
    assert not problems, "\n".join(problems)


class _HeaderWithClinician(StudyHeader):
    ordering_clinician: str | None = Field(default=None, description="Invented new field.")


class _AnalysisWithNewFields(Analysis):
    study: _HeaderWithClinician = Field(description="Study identification.")
    order_number: str | None = Field(default=None, description="Invented new field.")


def test_a_field_added_without_a_classification_is_named_with_the_line_to_add() -> None:
    problems = allow_list_problems(COLUMNS, model=_AnalysisWithNewFields)
    assert len(problems) == 2, problems
    for path in ("order_number", "study.ordering_clinician"):
        expected = (
            f"{ALLOW_LIST_PATH} has no line for record field '{path}' (str | None): add one line "
            f"'record,{path},<kept|generalised|dropped>,<rule>,<why>'"
        )
        assert any(p.startswith(expected) for p in problems), problems


def test_a_table_column_added_without_a_classification_is_named() -> None:
    columns = {**COLUMNS, "studies": [*COLUMNS["studies"], "referring_physician"]}
    problems = allow_list_problems(columns)
    assert problems == [
        f"{ALLOW_LIST_PATH} has no line for studies field 'referring_physician' (table column): "
        "add one line 'studies,referring_physician,<kept|generalised|dropped>,<rule>,<why>' "
        "(identifiers and free text: dropped; see the file's header)"
    ]
    with pytest.raises(UnclassifiedFieldError, match="'referring_physician'"):
        deidentified_row("studies", columns["studies"], [None] * len(columns["studies"]))


def test_the_de_identifier_refuses_a_record_with_an_unclassified_field(tmp_path: Path) -> None:
    # Fail closed: an unreviewed field stops de-identification instead of passing through.
    base = analyze_file(_study_file(tmp_path))
    data = base.model_dump()
    data["order_number"] = "ORD-7730021"
    data["study"]["ordering_clinician"] = "Dr Anselm Pryce"
    extended = _AnalysisWithNewFields.model_validate(data)
    with pytest.raises(UnclassifiedFieldError, match=r"'study\.ordering_clinician'"):
        deidentify(extended, KEY)


def test_free_text_and_identifiers_are_dropped_not_kept() -> None:
    table = allow_list()
    # Safe Harbor identifiers and free text (45 CFR 164.514(b)(2)(i)): never "kept".
    for path in (
        "study.date",
        "study.lab",
        "study.lab_address",
        "study.reader",
        "study.sonographer",
        "study.referring_physician",
        "study.indication",
        "study.comments",
        "patient.name",
        "patient.birth_date",
        "haemodynamics.symptoms",
        "contrast_agent",
        "kinetics.source_file",
    ):
        assert table[("record", path)].treatment is Treatment.DROPPED, path
    for path in ("study.id", "patient.id", "territory_map.title", "territory_map.source"):
        assert table[("record", path)].treatment is Treatment.GENERALISED, path
    assert table[("studies", "date")].treatment is Treatment.DROPPED


def _study_file(folder: Path, territory_map: str | None = None) -> Path:
    data = {
        "schema_version": 1,
        "study": {"id": "WH-2026-0001", "date": "2026-03-09"},
        "patient": {"id": "MRN-7730021", "age_years": 61, "sex": "female"},
        "protocol": "dobutamine",
        "stages": {
            "rest": {"heart_rate_bpm": 70, "wall_motion": "111111 111111 1111 1"},
            "peak": {"heart_rate_bpm": 140, "wall_motion": "121111 221111 2111 1"},
        },
    }
    if territory_map is not None:
        data["territory_map"] = territory_map
    path = folder / "study.json"
    path.write_text(json.dumps(data), encoding="utf-8")
    return path


def _lab_map(folder: Path, *, name: str | None = None) -> Path:
    lines = [f"title: {MAP_TITLE}", f"source: {MAP_SOURCE}"]
    if name is not None:
        lines.insert(0, f"name: {name}")
    lines += [
        "territories:",
        '  "17":',
        "    LAD: [1, 2, 7, 8, 13, 14, 17]",
        "    RCA: [3, 4, 9, 10, 15, 16]",
        "    LCx: [5, 6, 11, 12]",
    ]
    path = folder / f"{MAP_FILE_STEM}.yaml"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


NEEDLES = [MAP_TITLE, MAP_SOURCE, MAP_FILE_STEM, "Ashdown", "Kilbride", "Wrenhaven", "1122334"]


@pytest.mark.parametrize(
    "name",
    [
        None,  # no name: the map is named after its file, which names a patient
        "standard",  # a lab map posing as the built-in one, with its own title and source
    ],
    ids=["named-after-file", "posing-as-built-in"],
)
def test_lab_map_text_never_reaches_a_deidentified_record_or_table(
    tmp_path: Path, name: str | None
) -> None:
    _lab_map(tmp_path, name=name)
    original = analyze_file(_study_file(tmp_path, f"{MAP_FILE_STEM}.yaml"))
    assert original.territory_map.title == MAP_TITLE  # the identified report shows the lab's map
    clean = deidentify(original, KEY)
    assert clean.territory_map.title == LAB_MAP_TITLE
    assert clean.territory_map.name.startswith("lab-")
    text = clean.model_dump_json() + json.dumps(
        [tables.study_row(clean), tables.segment_rows(clean)], default=str
    )
    for needle in NEEDLES:
        assert needle not in text, needle
    # two different lab maps stay apart; the same map gets the same label
    assert deidentify(original, b"another invented key, 32 bytes!!").territory_map == (
        clean.territory_map
    )


def test_built_in_map_keeps_its_own_text(tmp_path: Path) -> None:
    original = analyze_file(_study_file(tmp_path, "left_dominant"))
    assert deidentify(original, KEY).territory_map == original.territory_map


def test_deidentified_table_rows_drop_what_the_allow_list_drops(tmp_path: Path) -> None:
    original = analyze_file(_study_file(tmp_path))
    clean = deidentify(original, KEY)
    columns = list(tables.STUDY_COLUMNS)
    identified, extract = tables.study_row(original), tables.study_row(clean)
    assert identified[columns.index("date")] == "2026-03-09"
    assert extract[columns.index("date")] is None
    assert extract[columns.index("study_id")] == clean.study.id != original.study.id
    assert extract[columns.index("wmsi_peak")] == identified[columns.index("wmsi_peak")]


@pytest.mark.skipif(shutil.which("pdftotext") is None, reason="needs pdftotext (poppler-utils)")
def test_lab_map_text_never_reaches_a_pdf_of_a_deidentified_record(tmp_path: Path) -> None:
    from reporting.render import write_report

    _lab_map(tmp_path)
    clean = deidentify(analyze_file(_study_file(tmp_path, f"{MAP_FILE_STEM}.yaml")), KEY)
    out = tmp_path / "out"
    paths = [Path(p) for p in write_report(clean, out)]
    pdf = next(p for p in paths if p.suffix == ".pdf")
    shown = subprocess.run(
        ["pdftotext", str(pdf), "-"], capture_output=True, text=True, check=True
    ).stdout
    assert LAB_MAP_TITLE in " ".join(shown.split())  # the neutral label is what the PDF shows
    for p in paths:
        data = p.read_bytes()
        for needle in NEEDLES:
            assert needle.encode() not in data, (needle, p.name)
    for needle in NEEDLES:
        assert needle not in shown, needle
