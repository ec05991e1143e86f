"""DICOM export: Comprehensive SR and Encapsulated PDF, checked with pydicom, dciodvfy and dsrdump.

External references: dciodvfy (Debian dicom3tools) validates each object against the IOD; dcmtk's
dsrdump renders the SR; pydicom reads both back (DICOM PS3.3, PS3.16).
"""

from __future__ import annotations

import io
import shutil
import subprocess
from pathlib import Path

import pydicom
import pytest
from click.testing import CliRunner
from interop_cases import (
    AT,
    CORRECTED,
    DEMO,
    FINAL,
    ORDER,
    PDF,
    UNSIGNED,
    demo_data,
    ordered,
    perfusion_not_seen,
    with_data,
)
from pydicom.dataset import Dataset
from pydicom.uid import ComprehensiveSRStorage, EncapsulatedPDFStorage

from reporting.cli import main
from reporting.codes import code
from reporting.errors import InputError, InputErrors, problems_of
from reporting.interop.dicom_files import dicom_bytes, dicom_objects
from reporting.interop.release import Release
from reporting.settings import default_settings

RELEASES = [UNSIGNED, FINAL, CORRECTED]
RELEASE_IDS = ["unsigned", "final", "corrected"]
needs_dciodvfy = pytest.mark.skipif(shutil.which("dciodvfy") is None, reason="dicom3tools missing")
needs_dsrdump = pytest.mark.skipif(shutil.which("dsrdump") is None, reason="dcmtk missing")


def read_back(ds: Dataset) -> Dataset:
    return pydicom.dcmread(io.BytesIO(dicom_bytes(ds)))


def items(ds: Dataset) -> list[Dataset]:
    """Every content item of the tree, depth first."""
    out = []
    for item in ds.get("ContentSequence", []):
        out.append(item)
        out.extend(items(item))
    return out


def concept_of(item: Dataset) -> tuple[str, str]:
    c = item.ConceptNameCodeSequence[0]
    return (c.CodingSchemeDesignator, c.CodeValue)


def value_of(item: Dataset) -> tuple[str, str]:
    c = item.ConceptCodeSequence[0]
    return (c.CodingSchemeDesignator, c.CodeValue)


def key(name: str) -> tuple[str, str]:
    c = code(name)
    return (c.scheme.value, c.value)


def dciodvfy_errors(path: Path) -> list[str]:
    run = subprocess.run(["dciodvfy", str(path)], capture_output=True, text=True, check=False)
    return [line for line in (run.stdout + run.stderr).splitlines() if line.startswith("Error")]


@needs_dciodvfy
@pytest.mark.parametrize("release", RELEASES, ids=RELEASE_IDS)
@pytest.mark.parametrize("name", ["DEMO-0001", "DEMO-0002", "DEMO-0004"])
def test_dciodvfy_reports_no_errors(tmp_path: Path, release: Release, name: str) -> None:
    # dicom3tools' dciodvfy checks each object against its IOD (DICOM PS3.3 and PS3.5)
    objects = dicom_objects(ordered(name), PDF, release, at=AT)
    for kind, ds in (("sr", objects.sr), ("pdf", objects.pdf)):
        path = tmp_path / f"{kind}.dcm"
        path.write_bytes(dicom_bytes(ds))
        assert dciodvfy_errors(path) == [], kind


@needs_dsrdump
def test_dsrdump_renders_the_sr(tmp_path: Path) -> None:
    # dcmtk's dsrdump parses and renders the SR content tree (DICOM PS3.3 and PS3.5)
    path = tmp_path / "sr.dcm"
    path.write_bytes(dicom_bytes(dicom_objects(ordered(), PDF, FINAL, at=AT).sr))
    run = subprocess.run(["dsrdump", str(path)], capture_output=True, text=True, check=False)
    assert run.returncode == 0, run.stderr
    assert "Comprehensive SR Document" in run.stdout
    assert "Verification Flag   : VERIFIED" in run.stdout
    assert '"LV Wall Motion Score Index"' in run.stdout
    assert '"Peak cardiac stress state"' in run.stdout


def test_both_objects_carry_the_imaging_studys_identity() -> None:
    a = ordered()
    objects = dicom_objects(a, PDF, UNSIGNED, at=AT)
    sr, doc = read_back(objects.sr), read_back(objects.pdf)
    assert (sr.SOPClassUID, doc.SOPClassUID) == (ComprehensiveSRStorage, EncapsulatedPDFStorage)
    for ds in (sr, doc):
        assert ds.PatientID == a.patient.id
        assert str(ds.PatientName) == a.patient.name
        assert ds.StudyInstanceUID == ORDER["study_instance_uid"]
        assert ds.AccessionNumber == ORDER["accession_number"]
        assert ds.StudyID == a.study.id
        request = ds.get("ReferencedRequestSequence")
        if request is not None:
            assert request[0].PlacerOrderNumberImagingServiceRequest == ORDER["placer_order_number"]
            assert request[0].FillerOrderNumberImagingServiceRequest == ORDER["filler_order_number"]
    assert sr.SeriesInstanceUID != doc.SeriesInstanceUID and sr.SOPInstanceUID != doc.SOPInstanceUID
    assert "ReferencedRequestSequence" in sr


def test_pdf_bytes_come_back_up_to_the_document_length() -> None:
    # DICOM PS3.3: the PDF is padded to even length; compare up to Encapsulated Document Length
    assert len(PDF) % 2 == 1
    doc = read_back(dicom_objects(ordered(), PDF, UNSIGNED, at=AT).pdf)
    assert doc.MIMETypeOfEncapsulatedDocument == "application/pdf"
    assert doc.EncapsulatedDocumentLength == len(PDF)
    assert len(doc.EncapsulatedDocument) % 2 == 0
    assert doc.EncapsulatedDocument[: doc.EncapsulatedDocumentLength] == PDF


@pytest.mark.parametrize("release", RELEASES, ids=RELEASE_IDS)
def test_only_signed_versions_are_verified(release: Release) -> None:
    # DICOM PS3.3: a VERIFIED SR needs a Verifying Observer and Verifying Organization
    sr = read_back(dicom_objects(ordered(), PDF, release, at=AT).sr)
    if release.signer is None:
        assert sr.VerificationFlag == "UNVERIFIED" and "VerifyingObserverSequence" not in sr
    else:
        observer = sr.VerifyingObserverSequence[0]
        assert sr.VerificationFlag == "VERIFIED"
        assert str(observer.VerifyingObserverName) == release.signer.name
        assert observer.VerifyingOrganization == release.signer.organization
    assert "ContentTemplateSequence" not in sr  # claims no template (DICOM PS3.16 TID 5200)


def test_a_corrected_sr_lists_the_one_it_replaces() -> None:
    # DICOM PS3.3: a replacing SR lists what it replaces in the Predecessor Documents Sequence
    sr = read_back(dicom_objects(ordered(), PDF, CORRECTED, at=AT).sr)
    study = sr.PredecessorDocumentsSequence[0]
    series = study.ReferencedSeriesSequence[0]
    assert study.StudyInstanceUID == sr.StudyInstanceUID
    assert series.SeriesInstanceUID == CORRECTED.predecessor.sr_series_instance_uid  # type: ignore[union-attr]
    assert series.ReferencedSOPSequence[0].ReferencedSOPInstanceUID == "2.25.301"
    first = read_back(dicom_objects(ordered(), PDF, FINAL, at=AT).sr)
    assert "PredecessorDocumentsSequence" not in first
    assert first.SOPInstanceUID != sr.SOPInstanceUID  # a new instance


def test_wall_motion_per_stage_and_segment_matches_the_analysis() -> None:
    a = ordered()
    sr = read_back(dicom_objects(a, PDF, UNSIGNED, at=AT).sr)
    stage_keys = {key(f"stage.{s.value}"): s for s in a.stages}
    site_numbers = {key(f"segment.{s.name}"): s.number for s in a.segments}
    by_number = {s.number: s for s in a.segments}
    seen = 0
    for container in sr.ContentSequence:
        if container.ValueType != "CONTAINER" or concept_of(container) != key("findings"):
            continue
        children = list(container.ContentSequence)
        stage_items = [c for c in children if concept_of(c) == key("protocol_stage")]
        if not stage_items:
            continue  # the territories container
        stage = stage_keys[value_of(stage_items[0])]
        for item in children:
            if concept_of(item) == key("wall_motion"):
                number = site_numbers[value_of(item.ContentSequence[0])]
                score = by_number[number].wall_motion[stage]
                expected = "wall_motion.x" if score is None else f"wall_motion.{score}"
                assert value_of(item) == key(expected)
                seen += 1
            if concept_of(item) == key("wmsi"):
                value = float(item.MeasuredValueSequence[0].NumericValue)
                assert value == pytest.approx(a.wmsi[stage], rel=1e-9)
    assert seen == sum(len(s.wall_motion) for s in a.segments)


def test_a_segment_not_visualised_for_perfusion_is_a_value_less_qualified_score(
    tmp_path: Path,
) -> None:
    # DICOM PS3.3 C.18.1: Measured Value Sequence is type 2 (present, empty when there is no value)
    # and the Numeric Value Qualifier Code Sequence says why (PS3.16 CID 42, DCM 114006)
    a = perfusion_not_seen()
    objects = dicom_objects(a, PDF, FINAL, at=AT)
    sr = read_back(objects.sr)
    peak = next(
        c
        for c in sr.ContentSequence
        if concept_of(c) == key("findings")
        and any(
            concept_of(i) == key("protocol_stage") and value_of(i) == key("stage.peak")
            for i in c.ContentSequence
        )
    )
    scores = [i for i in peak.ContentSequence if concept_of(i) == key("perfusion")]
    assert len(scores) == 17
    apex = [i for i in scores if value_of(i.ContentSequence[0]) == key("segment.apex")]
    assert len(apex) == 1 and len(apex[0].MeasuredValueSequence) == 0
    qualifier = apex[0].NumericValueQualifierCodeSequence[0]
    assert (qualifier.CodingSchemeDesignator, qualifier.CodeValue) == ("DCM", "114006")
    assert all(len(i.MeasuredValueSequence) == 1 for i in scores if i is not apex[0])
    if shutil.which("dciodvfy"):
        path = tmp_path / "sr.dcm"
        path.write_bytes(dicom_bytes(objects.sr))
        assert dciodvfy_errors(path) == []


def test_conclusion_is_the_pdfs_impression() -> None:
    from reporting.render.narrative import narrative_text

    a = ordered()
    sr = read_back(dicom_objects(a, PDF, UNSIGNED, at=AT).sr)
    texts = [
        i.TextValue
        for i in items(sr)
        if i.ValueType == "TEXT" and concept_of(i) == key("conclusion")
    ]
    assert len(texts) == 1
    printed = narrative_text(a)
    for paragraph in texts[0].split("\n"):
        assert paragraph in printed  # the PDF reads this text form


def test_no_placeholder_system_or_lab_local_code_in_dicom() -> None:
    objects = dicom_objects(ordered(), PDF, FINAL, at=AT)
    for ds in (objects.sr, objects.pdf):
        data = dicom_bytes(ds)
        assert b".invalid" not in data and b"LOCAL" not in data


def test_without_the_imaging_study_uid_the_export_refuses_unless_asked() -> None:
    a = ordered(study_instance_uid=None)
    with pytest.raises(InputError) as caught:
        dicom_objects(a, PDF, UNSIGNED, at=AT)
    assert str(caught.value).startswith(
        "order.study_instance_uid: the imaging study's Study Instance UID is missing"
    )
    made = dicom_objects(a, PDF, UNSIGNED, at=AT, new_study=True)
    assert made.warning is not None and "will file apart from the images" in made.warning
    assert made.sr.StudyInstanceUID.startswith("2.25.")  # UUID-derived root (no lab root set)
    assert made.sr.StudyInstanceUID == made.pdf.StudyInstanceUID
    lab = default_settings().model_copy(update={"lab_uid_root": "1.2.826.0.1.3680043.10.999"})
    under = dicom_objects(a, PDF, UNSIGNED, at=AT, new_study=True, settings=lab)
    assert under.sr.StudyInstanceUID.startswith("1.2.826.0.1.3680043.10.999.")
    assert len(under.sr.SOPInstanceUID) <= 64


def test_a_study_id_longer_than_sh_is_refused_not_cut() -> None:
    # DICOM Study ID is SH, at most 16 characters (DICOM PS3.3 and PS3.5)
    data = demo_data()
    data["study"]["id"] = "STRESS-ECHO-2026-00042"  # 22 characters
    data["order"] = ORDER
    with pytest.raises(InputErrors) as caught:
        dicom_objects(with_data(data), PDF, UNSIGNED, at=AT)
    assert [str(p) for p in problems_of(caught.value)] == [
        "study.id: 'STRESS-ECHO-2026-00042' is 22 characters; DICOM Study ID (SH) holds at most 16 (refused, not cut)"
    ]


def test_a_backslash_in_a_name_is_refused_not_split() -> None:
    # DICOM PS3.5 6.4: backslash separates the values of a multi-valued element, so a patient's
    # name holding one would be read as two names (dciodvfy: bad Value Multiplicity).
    data = demo_data()
    data["patient"]["name"] = "Ann|Smith^Jr\\x"
    data["order"] = ORDER
    with pytest.raises(InputErrors) as caught:
        dicom_objects(with_data(data), PDF, UNSIGNED, at=AT)
    assert [str(p) for p in problems_of(caught.value)] == [
        "patient.name: 'Ann|Smith^Jr\\\\x' holds a backslash, which DICOM Patient's Name (PN) "
        "reads as a separator between two values (refused, not changed)"
    ]


def test_uids_are_stable_for_one_release_and_new_for_new_content() -> None:
    a = ordered()
    first = dicom_objects(a, PDF, FINAL, at=AT)
    again = dicom_objects(a, PDF, FINAL, at=AT)
    changed = dicom_objects(a, PDF + b" ", FINAL, at=AT)
    assert first.sr.SOPInstanceUID == again.sr.SOPInstanceUID
    assert dicom_bytes(first.sr) == dicom_bytes(again.sr)
    assert changed.sr.SOPInstanceUID != first.sr.SOPInstanceUID


def test_dicom_command_writes_both_files_or_explains_the_refusal(tmp_path: Path) -> None:
    runner = CliRunner()
    out = tmp_path / "out"
    refused = runner.invoke(main, ["dicom", str(DEMO / "DEMO-0001.yaml"), "-o", str(out)])
    assert refused.exit_code == 1
    # located in the study file, as every error is
    assert f"Error: {DEMO / 'DEMO-0001.yaml'}: order.study_instance_uid:" in refused.output
    assert not out.exists() or not list(out.iterdir())  # no partial output
    made = runner.invoke(
        main, ["dicom", str(DEMO / "DEMO-0001.yaml"), "-o", str(out), "--new-study"]
    )
    assert made.exit_code == 0, made.output
    assert "Warning: the imaging study's Study Instance UID is not known" in made.output
    sr = pydicom.dcmread(out / "DEMO-0001.sr.dcm")
    doc = pydicom.dcmread(out / "DEMO-0001.pdf.dcm")
    assert sr.VerificationFlag == "UNVERIFIED"  # file mode is never signed
    assert doc.EncapsulatedDocument[:5] == b"%PDF-"
