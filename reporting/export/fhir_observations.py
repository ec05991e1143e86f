"""The Observations of the FHIR export: wall motion and perfusion per stage and segment, WMSI and
LVEF per stage.

Each Observation has an identifier (``<study id>/<kind>/<stage>[/<segment>]``) for the conditional
update, the stage **explicitly** in a component coded DCM 109055 "Protocol Stage" whose value is the
stage's SNOMED CT phase from DICOM CID 3207 (rest 128975004, low dose 432655005 "Cardiac Stress
State", peak 434161005, recovery 432554001), and the segment as ``bodySite`` (DICOM CID 3717 codes;
the 18-segment apical ring's DCM codes). Wall motion uses the per-segment LOINC codes of the HL7
Europe imaging report guide for the 16- and 17-segment models and SNOMED CT "left
ventricular wall motion" for the 18-segment model; its value is the CID 3703/3704 code (normal,
hypokinesis, akinesis, dyskinesis, ventricular aneurysm, not visualised). WMSI is DCM 125202
(pydicom.sr.codedict, DICOM PS3.16), LVEF LOINC 10230-1. All codes come from ``data/codes.csv``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from functools import cache
from typing import Any

from reporting.codes import Code, code, fhir_system
from reporting.model import Stage
from reporting.results import Analysis, SegmentResult
from reporting.segments import SegmentModel
from reporting.wording import stage_words

OBSERVATION_CATEGORY = "http://terminology.hl7.org/CodeSystem/observation-category"
DATA_ABSENT_REASON = "http://terminology.hl7.org/CodeSystem/data-absent-reason"
PERFUSION_SCORE_TEXT = {1: "normal", 2: "reduced or delayed", 3: "absent"}
"""Visual contrast perfusion score (Porter TR et al., JASE 2018; from memory)."""


@dataclass(frozen=True)
class FhirContext:
    """What every Observation shares: the analysis, status, subject and naming functions."""

    analysis: Analysis
    status: str
    subject: dict[str, Any] | None
    performer: dict[str, Any] | None
    lab_code_system_uri: str | None
    url: Callable[[str], str]
    identifier: Callable[[str, str], dict[str, str]]


def _coding(c: Code) -> dict[str, str]:
    return dict(_open_coding(c))


@cache
def _open_coding(c: Code) -> dict[str, str]:
    system = fhir_system(c.scheme, None)
    assert system is not None, "observations use open codes only"
    return {"system": system, "code": c.value, "display": c.meaning}


def _concept(c: Code, text: str | None = None) -> dict[str, Any]:
    out: dict[str, Any] = {"coding": [_coding(c)]}
    if text is not None:
        out["text"] = text
    return out


def stage_component(stage: Stage) -> dict[str, Any]:
    """The component that carries the stage: DCM Protocol Stage = the CID 3207 phase."""
    return {
        "code": _concept(code("protocol_stage")),
        "valueCodeableConcept": _concept(code(f"stage.{stage.value}"), stage_words(stage)),
    }


def _quantity(value: float, unit: Code) -> dict[str, Any]:
    return {
        "valueQuantity": {
            "value": value,
            "unit": unit.meaning,
            "system": _coding(unit)["system"],
            "code": unit.value,
        }
    }


class _Observations:
    def __init__(self, context: FhirContext) -> None:
        self.c = context
        self.a = context.analysis
        self.date = (
            self.a.study.date.isoformat()
            if self.a.study.date is not None
            else f"{self.a.study.year:04d}"
        )
        self.out: list[tuple[str, dict[str, Any]]] = []

    def add(
        self,
        name: str,
        code_: dict[str, Any],
        value: dict[str, Any],
        stage: Stage,
        seg: SegmentResult | None = None,
    ) -> None:
        key = f"{self.a.study.id}/{name}"
        resource: dict[str, Any] = {
            "resourceType": "Observation",
            "identifier": [self.c.identifier("observation", key)],
            "status": self.c.status,
            "category": [
                {"coding": [{"system": OBSERVATION_CATEGORY, "code": "imaging", "display": "Imaging"}]}
            ],
            "code": code_,
        }  # fmt: skip
        if self.c.subject is not None:
            resource["subject"] = self.c.subject
        resource["effectiveDateTime"] = self.date
        if self.c.performer is not None:
            resource["performer"] = [self.c.performer]
        resource.update(value)
        if seg is not None:
            resource["bodySite"] = _concept(code(f"segment.{seg.name}"), f"segment {seg.number}")
        resource["component"] = [stage_component(stage)]
        self.out.append((self.c.url(f"observation/{name}"), resource))

    def wall_motion(self, stage: Stage, seg: SegmentResult) -> None:
        text = f"Wall motion, segment {seg.number} ({seg.name}), {stage_words(stage)}"
        if self.a.segment_model is SegmentModel.EIGHTEEN:
            # The LOINC codes name 17-segment regions; the 18-segment apical ring differs.
            name = code("wall_motion")
        else:
            name = code(f"wall_motion_loinc.{seg.name}")
        score = seg.wall_motion[stage]
        value = code("wall_motion.x" if score is None else f"wall_motion.{score}")
        shown = "not visualised" if score is None else f"{score} ({value.meaning})"
        self.add(
            f"wall-motion/{stage.value}/{seg.number}",
            _concept(name, text),
            {"valueCodeableConcept": _concept(value, shown)},
            stage,
            seg,
        )

    def perfusion(self, stage: Stage, seg: SegmentResult) -> None:
        text = f"Contrast perfusion score, segment {seg.number} ({seg.name}), {stage_words(stage)}"
        score = seg.perfusion[stage]
        if score is None:
            value: dict[str, Any] = {
                "dataAbsentReason": {
                    "coding": [{"system": DATA_ABSENT_REASON, "code": "unknown", "display": "Unknown"}],
                    "text": "not visualised",
                }
            }  # fmt: skip
        else:
            value = {"valueInteger": score}
            text += f": 1 normal, 2 {PERFUSION_SCORE_TEXT[2]}, 3 {PERFUSION_SCORE_TEXT[3]}"
        self.add(
            f"perfusion/{stage.value}/{seg.number}",
            _concept(code("perfusion"), text),
            value,
            stage,
            seg,
        )

    def build(self) -> list[tuple[str, dict[str, Any]]]:
        a = self.a
        for stage in a.stages:
            for seg in a.segments:
                if stage in seg.wall_motion:
                    self.wall_motion(stage, seg)
        for stage in a.stages:
            for seg in a.segments:
                if stage in seg.perfusion:
                    self.perfusion(stage, seg)
        for stage, wmsi in a.wmsi.items():
            text = f"Wall motion score index, {stage_words(stage)}"
            self.add(
                f"wmsi/{stage.value}",
                _concept(code("wmsi"), text),
                _quantity(wmsi, code("unit.none")),
                stage,
            )
        for stage, h in a.haemodynamics.items():
            if h.lvef_percent is not None:
                text = f"Left ventricular ejection fraction, {stage_words(stage)}"
                self.add(
                    f"lvef/{stage.value}",
                    _concept(code("lvef"), text),
                    _quantity(h.lvef_percent, code("unit.percent")),
                    stage,
                )
        return self.out


def observations(context: FhirContext) -> list[tuple[str, dict[str, Any]]]:
    """Every Observation of the analysis with its fullUrl, in reading order."""
    return _Observations(context).build()
