"""De-identification (HIPAA Safe Harbor, 45 CFR 164.514(b)(2)) and its byte scan (invented people)."""

from __future__ import annotations

import csv
import datetime as dt
import json
import os
import re
import subprocess
import sys
from pathlib import Path
from typing import Any

import jsonschema  # type: ignore[import-untyped, unused-ignore]
import pytest
import yaml

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
from reporting.export.record import record_dict
from reporting.model import Stage
from reporting.results import Analysis

KEY = b"an invented key for tests only, 32+ bytes"
ROOT = Path(__file__).parent.parent
SCHEMA = ROOT / "schemas" / "record-1.schema.json"

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


# Lab map text and file names that must not reach the extract either (issue 11).
MAP_TITLE = "Map drawn for Peregrine Ashdown-Vale by Dr Hesper Kilbride"
MAP_SOURCE = "Drawn at Wrenhaven Moor Heart Centre, ward Heronsgate"
HOSTILE_NAMES = [
    "Dr_Kilbride_map",  # a lab map named after its author
    "Quenby_broken_map",  # a broken lab map: its path would sit in the error's location
    "Bartholomew_Quenby_curves_missing",  # a missing curve file: its path would be quoted
    "1122334",  # an id written as a bare number: "id 1122334 was read as a number"
]


def identifiers() -> list[str]:
    found: set[str] = {LAB, "Wrenhaven", "Heronsgate", "Castellan", *TEXT.values()}
    found |= {MAP_TITLE, MAP_SOURCE, *HOSTILE_NAMES}
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


MAP_TERRITORIES = {
    "17": {"LAD": [1, 2, 7, 8, 13, 14, 17], "RCA": [3, 4, 9, 10, 15, 16], "LCx": [5, 6, 11, 12]}
}


def hostile_inputs(indir: Path) -> None:
    """Broken studies whose messages would quote numbers, dates and paths, and lab maps with names."""
    folder = indir / "Ludovica_Tremayne"
    # an id YAML reads as a number: the message would quote it
    (folder / "1122334.yaml").write_text(
        "schema_version: 1\nstudy: {id: 1122334, date: 2026-04-17}\nprotocol: dobutamine\n"
        "stages: {rest: {wall_motion: '111111 111111 1111 1'}}\n",
        encoding="utf-8",
    )
    # a date in the wrong form: the message would quote it
    bad_date = study(PEOPLE[1])
    bad_date["study"].update(id="WH-2026-0010", date="17/04/2026")
    (folder / "WH-2026-0010.json").write_text(json.dumps(bad_date), encoding="utf-8")
    # a curve file that is not there: the message would quote its path
    missing = study(PEOPLE[2])
    missing["study"]["id"] = "WH-2026-0011"
    missing["perfusion_curves"] = "Bartholomew_Quenby_curves_missing.csv"
    (folder / "WH-2026-0011.json").write_text(json.dumps(missing), encoding="utf-8")
    # a broken lab map named by a study: the map's path would be the location
    broken = {"title": MAP_TITLE, "territories": {"17": {"XYZ": [1]}}}
    (folder / "Quenby_broken_map.yaml").write_text(yaml.safe_dump(broken), encoding="utf-8")
    uses_broken = study(PEOPLE[2])
    uses_broken["study"]["id"] = "WH-2026-0012"
    uses_broken["territory_map"] = "Quenby_broken_map.yaml"
    (folder / "WH-2026-0012.json").write_text(json.dumps(uses_broken), encoding="utf-8")


@pytest.fixture(scope="module")
def extract_run(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, str]:
    """The extract folder, and everything the batch printed (with debug logging on)."""
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
        if row is PEOPLE[2]:  # a lab map beside the study, with names in its text and file name
            lab_map = {"title": MAP_TITLE, "source": MAP_SOURCE, "territories": MAP_TERRITORIES}
            (path.parent / "Dr_Kilbride_map.yaml").write_text(yaml.safe_dump(lab_map))
            data["territory_map"] = "Dr_Kilbride_map.yaml"
        path.write_text(json.dumps(data), encoding="utf-8")
    # a broken study whose error message would quote the name typed into a numeric field
    bad = study(PEOPLE[0])
    bad["study"]["id"] = "WH-2026-0009"
    bad["stages"]["rest"]["heart_rate_bpm"] = "Peregrine Ashdown-Vale"
    (indir / "Peregrine_Ashdown-Vale" / "WH-2026-0009.json").write_text(json.dumps(bad))
    hostile_inputs(indir)
    out = root / "out"
    # The command as a lab runs it, with every logger at debug level, so the scan sees it all.
    code = (
        "import logging, sys; logging.basicConfig(level=logging.DEBUG); "
        "from reporting.cli import main; sys.argv[0] = 'segreport'; main()"
    )
    args = ["batch", str(indir), "-o", str(out), "--deidentify", "--fhir", "--jobs", "2", "-q"]
    env = {**os.environ, KEY_ENV: KEY.decode()}
    run = subprocess.run(
        [sys.executable, "-c", code, *args], capture_output=True, text=True, env=env, cwd=ROOT
    )
    printed = run.stdout + run.stderr
    assert run.returncode == 1, printed  # studies failed
    summary = "8 studies: 3 done, 0 skipped, 5 failed; 2 lab settings or territory map files"
    assert summary in printed, printed
    return out, printed


@pytest.fixture(scope="module")
def extract(extract_run: tuple[Path, str]) -> Path:
    return extract_run[0]


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


def test_a_key_file_is_read_bounded(tmp_path: Path) -> None:
    # --deid-key-file /dev/zero read without end (24 GB in 30 s) and a 3 GB file whole (issue 11,
    # item 3); now at most 4,097 bytes are read, and more is refused.
    zero = tmp_path / "zero.key"
    zero.symlink_to("/dev/zero")
    sparse = tmp_path / "huge.key"
    with sparse.open("wb") as handle:
        handle.truncate(4 * 1024**3)  # 4 GB, sparse: nothing is written
    for path in (zero, sparse):
        with pytest.raises(DeidentificationKeyError, match="more than 4,096 bytes"):
            load_key(path, environ={})


def test_a_key_file_may_be_a_pipe(tmp_path: Path) -> None:
    # --deid-key-file <(command printing the key): the shell hands over a pipe (common practice
    # for secrets kept in a password manager), which must keep working.
    import os
    import threading

    pipe = tmp_path / "key.fifo"
    os.mkfifo(pipe)
    writer = threading.Thread(target=lambda: pipe.write_bytes(KEY + b"\n"))
    writer.start()
    try:
        assert load_key(pipe, environ={}) == KEY
    finally:
        writer.join(timeout=10)


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
    # the computed impression is made again from the de-identified values, never carried over
    from reporting.render.narrative import computed_impression_text

    assert clean.computed_impression == computed_impression_text(clean)
    assert clean.findings_sha256 == original.findings_sha256  # scores and codes only
    # a record read back with words that quote the age is never carried into the copy
    quoted = "Aged 93, target 127 bpm not reached."
    stored = Analysis.model_validate(record_dict(original) | {"computed_impression": quoted})
    assert stored.computed_impression == quoted
    assert deidentify(stored, KEY).computed_impression == clean.computed_impression


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
    paths = [str(extract.parent), extract.parent.name]  # where the inputs were: no path at all
    for needle in identifiers() + paths:
        raw = needle.encode("utf-8")
        for p, data in contents.items():
            assert raw not in data, f"{needle!r} found in {p.name}"
            assert needle not in p.relative_to(extract).as_posix(), f"{needle!r} in a file name"


def test_every_message_of_a_deidentified_batch_is_free_of_input(
    extract_run: tuple[Path, str],
) -> None:
    extract, printed = extract_run
    assert "Error: F-" in printed and "INFO:reporting.batch" in printed  # messages and logs seen
    for needle in [*identifiers(), str(extract.parent), extract.parent.name]:
        assert needle not in printed, f"{needle!r} printed: {printed}"


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
    rows = list(csv.DictReader((extract / "failures.csv").open(encoding="utf-8")))
    assert len(rows) >= 4
    assert all(re.fullmatch(r"F-[0-9a-f]{24}", row["file"]) for row in rows)
    # the location keeps the study format's own words; file names in it become "…"
    assert {"stages.rest.heart_rate_bpm", "study.date", "study.id"} <= {r["location"] for r in rows}
    assert any("…" in r["location"] for r in rows)
    # no digit of any input survives in a message (ids, dates, values)
    assert not any(re.search(r"\d", r["message"]) for r in rows)


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
