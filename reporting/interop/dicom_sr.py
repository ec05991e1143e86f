"""DICOM Comprehensive SR of a stress-echo result.

The document claims **no template** (no Content Template Sequence): TID 5200 is the resting echo
procedure report and a stress result does not follow it (DICOM PS3.16 TID 5200). It uses the codes of the
context groups named there, all from ``data/codes.csv``: the procedure and stress protocol, one
``Findings`` container per stage with its protocol stage (CID 3207), heart rate, blood pressure,
LVEF, WMSI (DCM 125202), perfusion defect extent, and per segment the wall motion (CID 3703/3704)
and perfusion score with the segment as Finding Site (CID 3717), a segment not visualised for
perfusion as a value-less score qualified "Measurement failure" (CID 42); the territories in the PDF's own
sentences with the artery as Finding Site; the conclusion (the PDF's Impression), the Duke risk band
and the high-risk findings; the cautions as a comment. Only a signed release is VERIFIED, with its
Verifying Observer and Organization; a corrected one lists the SR it replaces in the Predecessor
Documents Sequence.
"""

from __future__ import annotations

import datetime as dt
import logging
from functools import cache

from pydicom.dataelem import RawDataElement
from pydicom.dataset import Dataset
from pydicom.sequence import Sequence
from pydicom.tag import Tag
from pydicom.uid import ComprehensiveSRStorage

from reporting.codes import code
from reporting.interop import dicom_header as header
from reporting.interop import dicom_items as items
from reporting.interop import words
from reporting.interop.identity import interpreter
from reporting.interop.release import Release
from reporting.model import Stage
from reporting.results import Analysis
from reporting.segments import Territory
from reporting.stress import DukeRisk

log = logging.getLogger(__name__)

SR_SERIES_NUMBER = 901
"""Series number of the SR (a number well above the imaging series)."""
_RISK_KEY = {DukeRisk.LOW: "risk.low", DukeRisk.INTERMEDIATE: "risk.intermediate"}
_RISK_KEY[DukeRisk.HIGH] = "risk.high"


def _coded(key: str) -> Dataset:
    c = code(key)
    item = Dataset()
    item.CodeValue = c.value
    item.CodingSchemeDesignator = c.scheme.value
    item.CodeMeaning = c.meaning
    return item


def _container(relationship: str | None, name: str, children: list[bytes]) -> bytes:
    return items.content_item(relationship, "CONTAINER", name, continuity=True, children=children)


def _code_item(relationship: str, name: str, value: str, *mods: bytes) -> bytes:
    return items.content_item(relationship, "CODE", name, concept=value, children=list(mods))


def _text(relationship: str, name: str, text: str, *mods: bytes) -> bytes:
    return items.content_item(relationship, "TEXT", name, text=text, children=list(mods))


def _num(name: str, value: float, unit: str, *mods: bytes) -> bytes:
    measured = (_decimal_string(value), unit)
    return items.content_item("CONTAINS", "NUM", name, measured=measured, children=list(mods))


def _no_value(name: str, reason: str, *mods: bytes) -> bytes:
    return items.content_item("CONTAINS", "NUM", name, no_value=reason, children=list(mods))


def _decimal_string(value: float) -> str:
    # DS holds at most 16 characters: full precision where it fits, else 10 significant digits.
    text = repr(float(value)).removesuffix(".0") if float(value).is_integer() else repr(value)
    return text if len(text) <= 16 else f"{value:.10g}"


@cache
def _site(key: str) -> bytes:
    return _code_item("HAS CONCEPT MOD", "finding_site", key)


@cache
def _wall_motion(site: str, value: str) -> bytes:
    # The same segment with the same finding recurs across stages and studies: encode it once.
    return _code_item("CONTAINS", "wall_motion", value, _site(site))


def _pname(relationship: str, name: str, person: str) -> bytes:
    return items.content_item(relationship, "PNAME", name, person=person)


def _stage_findings(analysis: Analysis, stage: Stage) -> bytes:
    children = [_code_item("HAS ACQ CONTEXT", "protocol_stage", f"stage.{stage.value}")]
    h = analysis.haemodynamics.get(stage)
    if h is not None:
        if h.heart_rate_bpm is not None:
            children.append(_num("heart_rate", h.heart_rate_bpm, "unit.per_minute"))
        if h.systolic_bp_mmhg is not None:
            children.append(_num("systolic_bp", h.systolic_bp_mmhg, "unit.mmhg"))
        if h.diastolic_bp_mmhg is not None:
            children.append(_num("diastolic_bp", h.diastolic_bp_mmhg, "unit.mmhg"))
        if h.lvef_percent is not None:
            children.append(_num("lvef", h.lvef_percent, "unit.percent"))
    if stage in analysis.wmsi:
        children.append(_num("wmsi", analysis.wmsi[stage], "unit.none"))
    extent = analysis.perfusion.defect_extent_percent.get(stage)
    if extent is not None:
        children.append(_num("perfusion_defect_extent", extent, "unit.percent"))
    for seg in analysis.segments:
        site = f"segment.{seg.name}"
        if stage in seg.wall_motion:
            score = seg.wall_motion[stage]
            value = "wall_motion.x" if score is None else f"wall_motion.{score}"
            children.append(_wall_motion(site, value))
    for seg in analysis.segments:
        if stage not in seg.perfusion:
            continue
        score = seg.perfusion[stage]
        where = _site(f"segment.{seg.name}")
        if score is None:  # not visualised: a perfusion item without a value, saying why
            children.append(_no_value("perfusion", "measurement_failure", where))
        else:
            children.append(_num("perfusion", score, "unit.none", where))
    return _container("CONTAINS", "findings", children)


def _conclusions(analysis: Analysis) -> bytes:
    children = [_text("CONTAINS", "conclusion", words.conclusion_text(analysis))]
    if analysis.conclusion.ischemia:
        children.append(_code_item("CONTAINS", "finding", "ischemia"))
    stress = analysis.stress
    if stress.duke_treadmill_score is not None:
        children.append(_num("duke_treadmill_score", stress.duke_treadmill_score, "unit.none"))
    if stress.duke_risk is not None:
        children.append(_code_item("CONTAINS", "risk", _RISK_KEY[stress.duke_risk]))
    children.extend(_text("CONTAINS", "finding", t) for t in words.high_risk_texts(analysis))
    return _container("CONTAINS", "conclusions", children)


def content_tree(analysis: Analysis) -> list[bytes]:
    """The children of the root container, in reading order."""
    children = [
        _code_item("HAS CONCEPT MOD", "procedure_reported", "procedure"),
        _code_item("HAS ACQ CONTEXT", "stress_protocol", f"protocol.{analysis.protocol.value}"),
    ]
    reader = interpreter(analysis)
    if reader is not None:
        children.append(_code_item("HAS OBS CONTEXT", "observer_type", "observer_type.person"))
        children.append(_pname("HAS OBS CONTEXT", "person_observer_name", reader.name))
    children.extend(_stage_findings(analysis, stage) for stage in analysis.stages)
    territories = [
        _text("CONTAINS", "finding", words.territory_text(analysis, t), _site(f"territory.{t}"))
        for t in Territory
        if analysis.territories[t].segments
    ]
    children.append(_container("CONTAINS", "findings", territories))
    children.append(_conclusions(analysis))
    children.append(_text("CONTAINS", "comment", words.cautions_text(analysis)))
    return children


def sr_dataset(
    analysis: Analysis,
    release: Release,
    *,
    study_instance_uid: str,
    series_instance_uid: str,
    sop_instance_uid: str,
    at: dt.datetime,
) -> Dataset:
    """The Comprehensive SR of ``analysis`` as released; identity checked by the caller."""
    ds = header.new_dataset(ComprehensiveSRStorage, sop_instance_uid)
    header.add_patient_and_study(ds, analysis, study_instance_uid)
    header.add_series(ds, "SR", series_instance_uid, SR_SERIES_NUMBER)
    ds.ReferencedPerformedProcedureStepSequence = Sequence()
    header.add_equipment(ds, analysis)
    header.add_content_time(ds, at)
    ds.CompletionFlag = "COMPLETE"
    if release.signer is not None:  # final or corrected: signed, so verified
        signer = release.signer
        observer = Dataset()
        observer.VerifyingObserverName = signer.name
        observer.VerifyingObserverIdentificationCodeSequence = Sequence()
        observer.VerifyingOrganization = signer.organization
        observer.VerificationDateTime = signer.signed_at.strftime("%Y%m%d%H%M%S%z")
        ds.VerificationFlag = "VERIFIED"
        ds.VerifyingObserverSequence = Sequence([observer])
    else:
        ds.VerificationFlag = "UNVERIFIED"
    if release.state.replaces and (release.predecessor is None or release.predecessor.released):
        ds.PredecessorDocumentsSequence = _predecessor(release, study_instance_uid)
    request = header.referenced_request(analysis, study_instance_uid)
    if request is not None:
        ds.ReferencedRequestSequence = request
    ds.PerformedProcedureCodeSequence = Sequence([_coded(f"protocol.{analysis.protocol.value}")])
    ds.ValueType = "CONTAINER"
    ds.ConceptNameCodeSequence = Sequence([_coded("report_title")])
    ds.ContinuityOfContent = "SEPARATE"
    content = items.sequence(items.CONTENT_SEQUENCE, content_tree(analysis))
    # The encoded tree goes in as one raw element, written as it is (see dicom_items); pydicom
    # writes the header and, the length being undefined, the sequence delimiter itself.
    header_size = 12  # tag (4), VR (2), reserved (2), undefined length (4)
    value = content[header_size : -len(items.SEQUENCE_END)]
    ds[items.CONTENT_SEQUENCE] = RawDataElement(
        Tag(items.CONTENT_SEQUENCE), "SQ", 0xFFFFFFFF, value, 0, False, True
    )
    ds.set_original_encoding(False, True, ds._character_set)
    return ds


def _predecessor(release: Release, study_instance_uid: str) -> Sequence:
    before = release.predecessor
    if (
        before is None
        or before.sr_sop_instance_uid is None
        or before.sr_series_instance_uid is None
    ):
        raise ValueError("a corrected SR needs the SOP and series UIDs of the SR it replaces")
    instance = Dataset()
    instance.ReferencedSOPClassUID = ComprehensiveSRStorage
    instance.ReferencedSOPInstanceUID = before.sr_sop_instance_uid
    series = Dataset()
    series.SeriesInstanceUID = before.sr_series_instance_uid
    series.ReferencedSOPSequence = Sequence([instance])
    study = Dataset()
    study.StudyInstanceUID = study_instance_uid
    study.ReferencedSeriesSequence = Sequence([series])
    return Sequence([study])
