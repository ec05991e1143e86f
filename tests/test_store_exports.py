"""Exports from the report store (#16 item 6): ``segreport dicom|hl7|fhir --store ID [--version N]``.

Only signed versions go out; the PDF sent is the stored signed PDF byte for byte; an amended
version goes out as a correction (HL7 result status C, FHIR ``amended``, a new SR instance listing
the SR it replaces in the Predecessor Documents Sequence). Checked on SQLite through the command
line, with the external validators of the file-mode tests: dciodvfy (dicom3tools), hl7apy and the
fhir.resources R4B models.
"""

from __future__ import annotations

import base64
import csv
import itertools
import json
import shutil
import subprocess
from pathlib import Path
from typing import Any

import pydicom
import pytest
from click.testing import CliRunner, Result
from fhir.resources.R4B.bundle import Bundle
from hl7apy.consts import VALIDATION_LEVEL
from hl7apy.parser import parse_message
from interop_cases import ORDER
from store_support import PASSWORD, cheap_argon2, study_data, write_study

from reporting.cli import main

__all__ = ["cheap_argon2"]

STUDY = "DEMO-0002"
AMENDED_LINE = "Amended report: version 2 supersedes version 1. Reason: segment 7 rescored"
LAB = "Larkspur Valley Heart Clinic, Echo Laboratory"  # DEMO-0002's lab
needs_dciodvfy = pytest.mark.skipif(shutil.which("dciodvfy") is None, reason="dicom3tools missing")


def run(*args: str, stdin: str = "") -> Result:
    return CliRunner().invoke(main, list(args), input=stdin, catch_exceptions=False)


def store_cmd(db: str, *args: str) -> Result:
    result = run(
        "store", *args, "--db", db, "--as", "alice", "--password-stdin", stdin=PASSWORD + "\n"
    )
    assert result.exit_code == 0, result.output
    return result


@pytest.fixture(scope="module")
def store(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """A SQLite store: DEMO-0002 with its order signed (v1) and amended (v2); UNSIGNED-1 unsigned."""
    from argon2 import PasswordHasher

    from reporting.store import users

    saved = users.hasher
    users.hasher = lambda: PasswordHasher(time_cost=1, memory_cost=256, parallelism=1)  # type: ignore[assignment]
    try:
        base = tmp_path_factory.mktemp("store-exports")
        db = str(base / "s.db")
        init = run(
            "store",
            "init",
            "--db",
            db,
            "--admin",
            "alice",
            "--full-name",
            "Dr Alice Example",
            "--password-stdin",
            stdin=PASSWORD + "\n",
        )
        assert init.exit_code == 0, init.output
        data = study_data(STUDY)
        data["order"] = dict(ORDER)
        first = write_study(base / "v1", data)
        unsigned = study_data("DEMO-0001")
        unsigned["study"]["id"] = "UNSIGNED-1"
        store_cmd(db, "import", str(first), str(write_study(base / "v1", unsigned)))
        store_cmd(db, "sign", STUDY)
        data["stages"]["peak"]["wall_motion"] = "111111 211111 1111 1"  # segment 7 rescored
        second = write_study(base / "v2", data)
        store_cmd(db, "amend", STUDY, str(second), "--reason", "segment 7 rescored")
        # a second study: signed, corrected (v2), then an addendum (v3)
        other = study_data("DEMO-0004")
        other["order"] = {**ORDER, "accession_number": "ACC-2026-0043"}
        store_cmd(db, "import", str(write_study(base / "o1", other)))
        store_cmd(db, "sign", "DEMO-0004")
        other["stages"]["peak"]["wall_motion"] = "111111 111111 1111 1"
        # the reader confirms the impression against the corrected scores (else signing refuses)
        other = _reconfirmed(other)
        store_cmd(
            db,
            "amend",
            "DEMO-0004",
            str(write_study(base / "o2", other)),
            "--reason",
            "typo",
            "--correction",
        )
        store_cmd(db, "amend", "DEMO-0004", "--addendum", "Discussed with the referring doctor.")
        pdfs = {}
        for version in (1, 2):
            out = base / f"show{version}"
            shown = run(
                "store", "show", STUDY, "--version", str(version), "-o", str(out), "--db", db
            )
            assert shown.exit_code == 0, shown.output
            pdfs[version] = (out / f"{STUDY}.v{version}.pdf").read_bytes()
        yield {"db": db, "base": base, "pdf": pdfs}
    finally:
        users.hasher = saved  # type: ignore[method-assign]


def export(store: dict[str, Any], kind: str, version: int, name: str) -> Path:
    out = store["base"] / name
    result = run(
        kind, "--store", STUDY, "--version", str(version), "--db", store["db"], "-o", str(out)
    )
    assert result.exit_code == 0, result.output
    return out


def hl7_fields(message: str, segment: str) -> list[list[str]]:
    return [s.split("|") for s in message.split("\r") if s.startswith(segment + "|")]


@pytest.mark.parametrize(("version", "status"), [(1, "F"), (2, "C")], ids=["final", "amended"])
def test_hl7_from_the_store(store: dict[str, Any], version: int, status: str) -> None:
    message = export(store, "hl7", version, f"v{version}.hl7").read_bytes().decode()
    parsed = parse_message(message, validation_level=VALIDATION_LEVEL.TOLERANT, find_groups=True)
    assert parsed.validate() is True  # hl7apy
    (obr,) = hl7_fields(message, "OBR")
    assert obr[25] == status  # HL7 table 0123: F final, C correction
    (ed,) = [o for o in hl7_fields(message, "OBX") if o[2] == "ED"]
    assert base64.b64decode(ed[5].split("^")[-1]) == store["pdf"][version]  # the signed PDF
    # the amendment's reason travels as text too, in the signed PDF's own page-1 words
    notes = [n[3] for n in hl7_fields(message, "NTE")]
    assert (notes[0] == AMENDED_LINE) == (version == 2), notes


@pytest.mark.parametrize(
    ("version", "status"), [(1, "final"), (2, "amended")], ids=["final", "amended"]
)
def test_fhir_from_the_store(store: dict[str, Any], version: int, status: str) -> None:
    data = json.loads(export(store, "fhir", version, f"v{version}.json").read_text())
    Bundle.model_validate(data)  # fhir.resources R4B
    (report,) = [
        e["resource"] for e in data["entry"] if e["resource"]["resourceType"] == "DiagnosticReport"
    ]
    assert report["status"] == status  # FHIR R4 DiagnosticReport.status
    assert base64.b64decode(report["presentedForm"][0]["data"]) == store["pdf"][version]
    assert "Dr Alice Example" in json.dumps(data)  # the signer interprets
    # an amendment: a Provenance of the report (FHIR R4 Provenance: target, recorded, activity
    # v3-DataOperation UPDATE, reason, agent.who) with the reason in the signed PDF's words
    provenance = [
        e["resource"] for e in data["entry"] if e["resource"]["resourceType"] == "Provenance"
    ]
    assert (AMENDED_LINE in report["text"]["div"]) == (version == 2)
    if version == 1:
        assert provenance == []
        return
    ((revision,),) = [provenance]
    assert revision["reason"] == [{"text": AMENDED_LINE}]
    assert revision["activity"]["coding"][0]["code"] == "UPDATE"
    assert revision["target"] == [{"reference": data["entry"][0]["fullUrl"]}]  # the report
    (signer,) = [
        e for e in data["entry"] if e["fullUrl"] == revision["agent"][0]["who"]["reference"]
    ]
    assert signer["resource"]["name"] == [{"text": "Dr Alice Example"}]


@needs_dciodvfy
def test_dicom_from_the_store_verified_and_amended_with_its_predecessor(
    store: dict[str, Any],
) -> None:
    v1 = export(store, "dicom", 1, "dicom1")
    v2 = export(store, "dicom", 2, "dicom2")
    sr1, sr2 = (pydicom.dcmread(d / f"{STUDY}.sr.dcm") for d in (v1, v2))
    for folder in (v1, v2):
        for name in (f"{STUDY}.sr.dcm", f"{STUDY}.pdf.dcm"):
            check = subprocess.run(
                ["dciodvfy", str(folder / name)], capture_output=True, text=True, check=False
            )
            errors = [
                x for x in (check.stdout + check.stderr).splitlines() if x.startswith("Error")
            ]
            assert errors == [], name
    for sr in (sr1, sr2):
        assert sr.VerificationFlag == "VERIFIED"
        observer = sr.VerifyingObserverSequence[0]
        assert str(observer.VerifyingObserverName) == "Dr Alice Example"
        assert observer.VerifyingOrganization == LAB
    assert "PredecessorDocumentsSequence" not in sr1
    # DICOM PS3.3: the amended SR is a new instance listing the SR sent for version 1
    assert sr2.SOPInstanceUID != sr1.SOPInstanceUID
    study = sr2.PredecessorDocumentsSequence[0]
    series = study.ReferencedSeriesSequence[0]
    assert study.StudyInstanceUID == sr1.StudyInstanceUID == ORDER["study_instance_uid"]
    assert series.SeriesInstanceUID == sr1.SeriesInstanceUID
    assert series.ReferencedSOPSequence[0].ReferencedSOPInstanceUID == sr1.SOPInstanceUID
    for version, folder in ((1, v1), (2, v2)):
        doc = pydicom.dcmread(folder / f"{STUDY}.pdf.dcm")
        sent = bytes(doc.EncapsulatedDocument)[: doc.EncapsulatedDocumentLength]
        assert sent == store["pdf"][version]  # byte for byte, up to the document length


def test_latest_signed_version_by_default(store: dict[str, Any]) -> None:
    out = store["base"] / "latest.hl7"
    result = run("hl7", "--store", STUDY, "--db", store["db"], "-o", str(out))
    assert result.exit_code == 0, result.output
    (obr,) = hl7_fields(out.read_bytes().decode(), "OBR")
    assert obr[25] == "C"


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (
            ("dicom", "--store", "UNSIGNED-1", "-o", "OUT"),
            "Error: study UNSIGNED-1 version 1: is not signed; only a signed version is exported",
        ),  # bad: an unsigned version
        (
            ("hl7", "--store", STUDY, "--version", "9", "-o", "OUT"),
            f"Error: study {STUDY}: has no version 9 (versions 1–2)",
        ),  # bad: no such version
        (
            ("fhir", "STUDYFILE", "--store", STUDY, "-o", "OUT"),
            "Error: --store: give either a STUDY file or --store ID, not both",
        ),  # bad: both sources
        (
            ("fhir", "-o", "OUT"),
            "Error: STUDY: missing: give a study file, or --store ID for a signed stored version",
        ),  # bad: no source
        (
            ("hl7", "--store", STUDY, "--territory-map", "standard", "-o", "OUT"),
            "Error: --territory-map: not with --store",
        ),  # bad: the stored record keeps its own map
    ],
    ids=["unsigned", "no-such-version", "both", "neither", "territory-map"],
)
def test_refusals_are_located_and_write_nothing(
    store: dict[str, Any], args: tuple[str, ...], message: str, request: pytest.FixtureRequest
) -> None:
    request_id = request.node.callspec.id
    out = store["base"] / "refused"
    study_file = write_study(store["base"] / "file", study_data(STUDY))
    argv = [str(out) if a == "OUT" else str(study_file) if a == "STUDYFILE" else a for a in args]
    result = run(*argv, "--db", store["db"]) if "--store" in argv else run(*argv)
    # CONTRACT: exit 1 for bad input, 2 for usage errors (options that do not go together)
    usage = request_id in ("both", "neither", "territory-map")
    assert result.exit_code == (2 if usage else 1)
    assert result.output.startswith(message), result.output
    assert not out.exists()


def test_version_needs_store(tmp_path: Path) -> None:
    path = write_study(tmp_path, study_data(STUDY))
    result = run("hl7", str(path), "--version", "2")  # bad: --version without --store
    assert result.exit_code == 2  # a usage error (CONTRACT)
    assert result.output.strip() == "Error: --version: only with --store ID"


@pytest.mark.parametrize(
    ("version", "report_status", "observation_status", "hl7_status"),
    [(1, "final", "final", "F"), (2, "corrected", "corrected", "C"), (3, "appended", "final", "C")],
    ids=["final", "corrected", "appended"],
)
def test_corrected_and_appended_versions(
    store: dict[str, Any],
    version: int,
    report_status: str,
    observation_status: str,
    hl7_status: str,
) -> None:
    # FHIR R4: DiagnosticReport.status corrected/appended; Observation.status has no "appended",
    # and an addendum leaves every observation as signed (final). HL7 table 0123: C correction.
    base = ["--store", "DEMO-0004", "--version", str(version), "--db", store["db"]]
    fhir_out = store["base"] / f"o{version}.json"
    assert run("fhir", *base, "-o", str(fhir_out)).exit_code == 0
    data = json.loads(fhir_out.read_text())
    Bundle.model_validate(data)  # fhir.resources R4B
    kinds = [e["resource"] for e in data["entry"]]
    (report,) = [r for r in kinds if r["resourceType"] == "DiagnosticReport"]
    assert report["status"] == report_status
    assert {r["status"] for r in kinds if r["resourceType"] == "Observation"} == {
        observation_status
    }
    hl7_out = store["base"] / f"o{version}.hl7"
    assert run("hl7", *base, "-o", str(hl7_out)).exit_code == 0
    message = hl7_out.read_bytes().decode()
    assert parse_message(message, validation_level=VALIDATION_LEVEL.TOLERANT).validate() is True
    (obr,) = hl7_fields(message, "OBR")
    assert obr[25] == hl7_status
    line = {
        2: "Corrected report: version 2 supersedes version 1. Reason: typo",
        3: "Addendum: version 3 supersedes version 2. Reason: addendum",
    }.get(version)
    assert (hl7_fields(message, "NTE")[0][3] == line) == (line is not None)
    revisions = [r["reason"][0]["text"] for r in kinds if r["resourceType"] == "Provenance"]
    assert revisions == ([line] if line else [])
    # the addendum's own words, headed as the signed PDF heads them: "Addendum (author, time): "
    added = "Discussed with the referring doctor."
    notes = [n[3] for n in hl7_fields(message, "NTE")]
    (narrative,) = [r["text"]["div"] for r in kinds if r["resourceType"] == "DiagnosticReport"]
    if version == 3:
        assert notes[1].startswith("Addendum (Dr Alice Example, 20") and notes[1].endswith(added)
        assert f"): {added}</p>" in narrative
    else:
        assert not any(added in n for n in notes) and added not in narrative


def test_each_replacing_sr_names_the_one_before(store: dict[str, Any]) -> None:
    srs = []
    for version in (1, 2, 3):
        out = store["base"] / f"odicom{version}"
        args = ["dicom", "--store", "DEMO-0004", "--version", str(version), "--db", store["db"]]
        assert run(*args, "-o", str(out)).exit_code == 0
        srs.append(pydicom.dcmread(out / "DEMO-0004.sr.dcm"))
    for before, after in itertools.pairwise(srs):
        ref = after.PredecessorDocumentsSequence[0].ReferencedSeriesSequence[0]
        assert ref.SeriesInstanceUID == before.SeriesInstanceUID
        assert ref.ReferencedSOPSequence[0].ReferencedSOPInstanceUID == before.SOPInstanceUID


def _reconfirmed(data: dict[str, Any]) -> dict[str, Any]:
    """``data`` with the reader's impression confirmed against its own scores (issue #13)."""
    from reporting.analysis import analyze
    from reporting.impression import confirm_impression
    from reporting.load import study_from_data

    study = study_from_data(data)
    confirmed = confirm_impression(study, analyze(study))
    result: dict[str, Any] = json.loads(confirmed.model_dump_json(exclude_none=True))
    return result


@pytest.mark.usefixtures("cheap_argon2")
def test_a_version_signed_without_a_lab_is_released_through_an_amendment_naming_it(
    tmp_path: Path,
) -> None:
    # A verified report names its lab as the verifying organization (DICOM Verifying Organization),
    # and a signed version never changes (FACTS: signing, amendments). A version signed without a
    # lab is refused with advice that can be followed (amend, never "sign again"), and the
    # amendment naming the lab goes out, though the version it replaces was never released.
    db = str(tmp_path / "s.db")
    init = run(
        "store", "init", "--db", db, "--admin", "alice", "--full-name", "Dr Alice Example",
        "--password-stdin", stdin=PASSWORD + "\n",
    )  # fmt: skip
    assert init.exit_code == 0, init.output
    data = study_data(STUDY)
    data["order"] = dict(ORDER)
    del data["study"]["lab"]
    store_cmd(db, "import", str(write_study(tmp_path / "v1", data)))
    store_cmd(db, "sign", STUDY)
    refused = run("hl7", "--store", STUDY, "--db", db, "-o", str(tmp_path / "refused.hl7"))
    assert refused.exit_code == 1
    assert "names none; a signed version never changes, so amend the study with its lab" in (
        refused.output
    )
    assert "sign again" not in refused.output
    data["study"]["lab"] = LAB
    store_cmd(db, "amend", STUDY, str(write_study(tmp_path / "v2", data)), "--reason", "lab named")
    for kind, out in (("hl7", "v2.hl7"), ("fhir", "v2.json"), ("dicom", "v2")):
        result = run(kind, "--store", STUDY, "--db", db, "-o", str(tmp_path / out))
        assert result.exit_code == 0, result.output
    sr = pydicom.dcmread(tmp_path / "v2" / f"{STUDY}.sr.dcm")
    assert sr.VerifyingObserverSequence[0].VerifyingOrganization == LAB
    assert "PredecessorDocumentsSequence" not in sr  # v1 was never released as an SR


def test_the_store_export_names_the_version_and_status_of_each_record(
    store: dict[str, Any], monkeypatch: pytest.MonkeyPatch
) -> None:
    # A signed record says only that its report was signed (report_status final) and never changes;
    # versions.csv says which version of each study went out and whether it amended, corrected or
    # added to a signed one (FHIR R4 DiagnosticReport.status codes,
    # http://hl7.org/fhir/R4/valueset-diagnostic-report-status.html).
    def exported(name: str, *extra: str) -> tuple[list[tuple[str, str, str]], list[str]]:
        out = store["base"] / name
        result = run("store", "export", "-o", str(out), *extra, "--db", store["db"])
        assert result.exit_code == 0, result.output
        with (out / "versions.csv").open(encoding="utf-8", newline="") as handle:
            rows = [
                (r["study_id"], r["version"], r["version_status"]) for r in csv.DictReader(handle)
            ]
        registry = (out / "registry.ndjson").read_text(encoding="utf-8").splitlines()
        return rows, [json.loads(line)["study"]["id"] for line in registry]

    rows, ids = exported("export-all")
    assert rows == [
        ("DEMO-0002", "2", "amended"),
        ("DEMO-0004", "3", "appended"),
        ("UNSIGNED-1", "1", "preliminary"),
    ]
    assert ids == [r[0] for r in rows]
    rows, ids = exported("export-final", "--final-only")
    assert rows == [("DEMO-0002", "2", "amended"), ("DEMO-0004", "3", "appended")]
    monkeypatch.setenv("SEGREPORT_DEID_KEY", "an invented key for tests only, 32+ bytes")
    rows, ids = exported("export-deid", "--deidentify")
    # de-identified: the records' own pseudonyms, the versions and statuses kept
    assert [r[0] for r in rows] == ids and not any(i.startswith(("DEMO", "UNSIGNED")) for i in ids)
    assert [r[1:] for r in rows] == [("2", "amended"), ("3", "appended"), ("1", "preliminary")]
