"""HL7 FHIR R4 export: an :class:`~reporting.results.Analysis` as a ``collection`` Bundle.

The Bundle holds a DiagnosticReport (status, conclusion text followed by the cautions every export
carries, the conclusion as a code of a local code system, and the PDF as ``presentedForm`` when one
was written), one Observation per segment and stage for wall motion (coded with the per-segment
LOINC codes of the HL7 Europe imaging report guide, FACTS.md §8) and for perfusion, the WMSI per
stage, the LVEF per stage (LOINC 10230-1) when given, and the Patient unless the analysis is
de-identified (then only a pseudonymous identifier is referenced).

Scores, stages, WMSI and the report code have no confirmed open code, so they use **local code
systems** under ``https://segreport.invalid/fhir/CodeSystem/`` (the ``.invalid`` domain says they
are local by construction; a receiving system maps them). No SNOMED CT code is emitted for the
conclusion because none was confirmed against the release here. Ids are UUID v5 derived from the
study id, and nothing depends on the clock, so the same analysis gives the same bytes.
"""

from __future__ import annotations

import base64
import json
import uuid
from typing import Any

from reporting.model import ReportStatus, Sex, Stage
from reporting.results import Analysis, DiagnosticStatus, SegmentResult
from reporting.segments import SegmentModel
from reporting.wording import CAUTIONS, stage_words

LOINC = "http://loinc.org"
UCUM = "http://unitsofmeasure.org"
OBSERVATION_CATEGORY = "http://terminology.hl7.org/CodeSystem/observation-category"
DIAGNOSTIC_SERVICE_SECTION = "http://terminology.hl7.org/CodeSystem/v2-0074"
DATA_ABSENT_REASON = "http://terminology.hl7.org/CodeSystem/data-absent-reason"

LOCAL = "https://segreport.invalid/fhir/CodeSystem/"
"""Base of the local code systems (not registered anywhere: local by design)."""
LOCAL_OBSERVATION = LOCAL + "observation"
LOCAL_WALL_MOTION_SCORE = LOCAL + "wall-motion-score"
LOCAL_PERFUSION_SCORE = LOCAL + "perfusion-score"
LOCAL_STAGE = LOCAL + "stage"
LOCAL_DIAGNOSTIC_STATUS = LOCAL + "diagnostic-status"
PSEUDONYMOUS_PATIENT_ID = "https://segreport.invalid/fhir/NamingSystem/pseudonymous-patient-id"
STUDY_ID_SYSTEM = "https://segreport.invalid/fhir/NamingSystem/study-id"

LVEF_LOINC = "10230-1"
"""Left ventricular ejection fraction (FACTS.md §8) [S]."""

WALL_MOTION_LOINC: dict[str, str] = {
    "basal anterior": "18121-4",
    "basal anteroseptal": "18122-2",
    "basal inferoseptal": "78192-2",
    "basal inferior": "18123-0",
    "basal inferolateral": "78193-0",
    "basal anterolateral": "78194-8",
    "mid anterior": "18129-7",
    "mid anteroseptal": "18130-5",
    "mid inferoseptal": "78195-5",
    "mid inferior": "18131-3",
    "mid inferolateral": "78196-3",
    "mid anterolateral": "78197-1",
    "apical anterior": "18119-8",
    "apical septal": "18120-6",
    "apical inferior": "18127-1",
    "apical lateral": "18128-9",
    "apex": "78198-9",
}
"""Per-segment wall-motion LOINC codes by segment name (17-segment names; HL7 Europe imaging report
guide, FACTS.md §8 [C]). The 18-segment model gets local codes only."""

WALL_MOTION_SCORE_TEXT = {
    1: "normal or hyperkinetic",
    2: "hypokinetic",
    3: "akinetic",
    4: "dyskinetic",
    5: "aneurysmal",
}
"""Lang RM et al., JASE 2015;28:1–39 (5 = aneurysmal on the older 5-point scale)."""
PERFUSION_SCORE_TEXT = {1: "normal", 2: "reduced or delayed", 3: "absent"}
"""Visual contrast perfusion score (Porter TR et al., JASE 2018; from memory)."""

STATUS_TEXT = {
    DiagnosticStatus.ISCHEMIA: "Inducible ischaemia",
    DiagnosticStatus.NO_ISCHEMIA: "No inducible ischaemia",
    DiagnosticStatus.NON_DIAGNOSTIC: "Non-diagnostic for ischaemia",
}
_GENDER = {Sex.FEMALE: "female", Sex.MALE: "male", Sex.OTHER: "other"}
_NAMESPACE = uuid.uuid5(uuid.NAMESPACE_URL, "https://segreport.invalid/fhir/")


def bundle(analysis: Analysis, *, pdf: bytes | None = None) -> dict[str, Any]:
    """The FHIR R4 Bundle (type ``collection``) for ``analysis`` as JSON-ready data."""
    builder = _Builder(analysis)
    return builder.bundle(pdf)


def bundle_json(analysis: Analysis, *, pdf: bytes | None = None) -> str:
    """The Bundle as indented JSON text ending in a newline (byte-stable)."""
    return json.dumps(bundle(analysis, pdf=pdf), indent=2, ensure_ascii=False) + "\n"


def conclusion_text(analysis: Analysis) -> str:
    """A short plain-text conclusion for ``DiagnosticReport.conclusion``."""
    c = analysis.conclusion
    parts = [STATUS_TEXT[c.status]]
    if c.ischemic_territories:
        territories = ", ".join(t.value for t in c.ischemic_territories)
        parts[0] += (
            f" in the {territories} territor{'ies' if len(c.ischemic_territories) > 1 else 'y'}"
        )
    parts[0] += "."
    if c.ischemic_segment_count:
        parts.append(
            f"Ischaemic segments: {c.ischemic_segment_count} "
            f"({c.ischemia_extent.value.replace('_', '–')})."
        )
    for stage, value in analysis.wmsi.items():
        parts.append(f"WMSI at {stage.value.replace('_', ' ')}: {value:.2f}.")
    parts.append(analysis.stress.adequacy_note)
    parts.extend(f"High-risk finding: {f.detail}" for f in c.high_risk_findings)
    return " ".join(parts)


class _Builder:
    def __init__(self, analysis: Analysis) -> None:
        self.a = analysis
        self.ns = uuid.uuid5(_NAMESPACE, analysis.study.id)
        self.status = (
            "final" if analysis.study.report_status is ReportStatus.FINAL else "preliminary"
        )
        study = analysis.study
        self.effective = study.date.isoformat() if study.date is not None else f"{study.year:04d}"
        self.patient_url: str | None = None
        self.subject: dict[str, Any] | None = None
        patient = analysis.patient
        if not study.deidentified:
            self.patient_url = self.url("patient")
            self.subject = {"reference": self.patient_url}
        elif patient.id is not None:
            self.subject = {"identifier": {"system": PSEUDONYMOUS_PATIENT_ID, "value": patient.id}}

    def url(self, name: str) -> str:
        return f"urn:uuid:{uuid.uuid5(self.ns, name)}"

    def bundle(self, pdf: bytes | None) -> dict[str, Any]:
        observations = [*self.wall_motion(), *self.perfusion(), *self.wmsi(), *self.lvef()]
        report_url = self.url("diagnostic-report")
        entries = [(report_url, self.report(report_url, observations, pdf))]
        if self.patient_url is not None:
            entries.append((self.patient_url, self.patient()))
        entries.extend(observations)
        return {
            "resourceType": "Bundle",
            "id": str(uuid.uuid5(self.ns, "bundle")),
            "type": "collection",
            "entry": [{"fullUrl": url, "resource": resource} for url, resource in entries],
        }

    def _id(self, url: str) -> str:
        return url.removeprefix("urn:uuid:")

    def report(
        self, url: str, observations: list[tuple[str, dict[str, Any]]], pdf: bytes | None
    ) -> dict[str, Any]:
        status = self.a.conclusion.status
        resource: dict[str, Any] = {
            "resourceType": "DiagnosticReport",
            "id": self._id(url),
            "identifier": [{"system": STUDY_ID_SYSTEM, "value": self.a.study.id}],
            "status": self.status,
            "category": [
                {
                    "coding": [
                        {
                            "system": DIAGNOSTIC_SERVICE_SECTION,
                            "code": "CUS",
                            "display": "Cardiac Ultrasound",
                        }
                    ]
                }
            ],
            "code": {
                "coding": [
                    {
                        "system": LOCAL_OBSERVATION,
                        "code": "stress-echo-report",
                        "display": "Stress echocardiography report",
                    }
                ],
                "text": f"Stress echocardiography report ({self.a.protocol.value})",
            },
        }
        if self.subject is not None:
            resource["subject"] = self.subject
        resource["effectiveDateTime"] = self.effective
        resource["result"] = [{"reference": obs_url} for obs_url, _ in observations]
        # The conclusion is the text a receiving system shows, so the cautions go there too
        # (DiagnosticReport has no note element in R4).
        resource["conclusion"] = "\n\n".join([conclusion_text(self.a), "\n".join(CAUTIONS)])
        resource["conclusionCode"] = [
            {
                "coding": [
                    {
                        "system": LOCAL_DIAGNOSTIC_STATUS,
                        "code": status.value,
                        "display": STATUS_TEXT[status],
                    }
                ],
                "text": STATUS_TEXT[status],
            }
        ]
        if pdf is not None:
            resource["presentedForm"] = [
                {
                    "contentType": "application/pdf",
                    "data": base64.b64encode(pdf).decode("ascii"),
                    "title": f"{self.a.study.id}.pdf",
                }
            ]
        return resource

    def patient(self) -> dict[str, Any]:
        assert self.patient_url is not None
        p = self.a.patient
        resource: dict[str, Any] = {"resourceType": "Patient", "id": self._id(self.patient_url)}
        if p.id is not None:
            resource["identifier"] = [{"value": p.id}]
        if p.name is not None:
            resource["name"] = [{"text": p.name}]
        if p.sex is not None:
            resource["gender"] = _GENDER[p.sex]
        if p.birth_date is not None:
            resource["birthDate"] = p.birth_date.isoformat()
        return resource

    def observation(
        self, name: str, code: dict[str, Any], value: dict[str, Any], stage: Stage | None
    ) -> tuple[str, dict[str, Any]]:
        url = self.url(f"observation/{name}")
        resource: dict[str, Any] = {
            "resourceType": "Observation",
            "id": self._id(url),
            "status": self.status,
            "category": [
                {
                    "coding": [
                        {"system": OBSERVATION_CATEGORY, "code": "imaging", "display": "Imaging"}
                    ]
                }
            ],
            "code": code,
        }
        if self.subject is not None:
            resource["subject"] = self.subject
        resource["effectiveDateTime"] = self.effective
        resource.update(value)
        if stage is not None:
            resource["component"] = [_stage_component(stage)]
        return url, resource

    def wall_motion(self) -> list[tuple[str, dict[str, Any]]]:
        out = []
        model = self.a.segment_model
        for stage in self.a.stages:
            for seg in self.a.segments:
                if stage not in seg.wall_motion:
                    continue
                score = seg.wall_motion[stage]
                coding = [
                    {
                        "system": LOCAL_OBSERVATION,
                        "code": f"wall-motion-{int(model)}-{seg.number}",
                        "display": f"Wall motion, segment {seg.number} ({seg.name})",
                    }
                ]
                loinc = _segment_loinc(model, seg)
                if loinc is not None:
                    coding.insert(0, {"system": LOINC, "code": loinc})
                code = {
                    "coding": coding,
                    "text": f"Wall motion, segment {seg.number} ({seg.name}), {stage_words(stage)}",
                }
                value = _scored(score, LOCAL_WALL_MOTION_SCORE, WALL_MOTION_SCORE_TEXT)
                out.append(
                    self.observation(f"wall-motion/{stage}/{seg.number}", code, value, stage)
                )
        return out

    def perfusion(self) -> list[tuple[str, dict[str, Any]]]:
        out = []
        for stage in self.a.stages:
            for seg in self.a.segments:
                if stage not in seg.perfusion:
                    continue
                code = {
                    "coding": [
                        {
                            "system": LOCAL_OBSERVATION,
                            "code": f"perfusion-{int(self.a.segment_model)}-{seg.number}",
                            "display": f"Contrast perfusion, segment {seg.number} ({seg.name})",
                        }
                    ],
                    "text": f"Contrast perfusion, segment {seg.number} ({seg.name}), {stage_words(stage)}",
                }
                value = _scored(seg.perfusion[stage], LOCAL_PERFUSION_SCORE, PERFUSION_SCORE_TEXT)
                out.append(self.observation(f"perfusion/{stage}/{seg.number}", code, value, stage))
        return out

    def wmsi(self) -> list[tuple[str, dict[str, Any]]]:
        out = []
        for stage, value in self.a.wmsi.items():
            code = {
                "coding": [
                    {
                        "system": LOCAL_OBSERVATION,
                        "code": "wmsi",
                        "display": "Wall motion score index",
                    }
                ],
                "text": f"Wall motion score index, {stage_words(stage)} (local code: no LOINC code confirmed)",
            }
            quantity = {"valueQuantity": {"value": value, "unit": "1", "system": UCUM, "code": "1"}}
            out.append(self.observation(f"wmsi/{stage}", code, quantity, stage))
        return out

    def lvef(self) -> list[tuple[str, dict[str, Any]]]:
        out = []
        for stage, data in self.a.haemodynamics.items():
            if data.lvef_percent is None:
                continue
            code = {
                "coding": [{"system": LOINC, "code": LVEF_LOINC}],
                "text": f"Left ventricular ejection fraction, {stage_words(stage)}",
            }
            quantity = {
                "valueQuantity": {
                    "value": data.lvef_percent,
                    "unit": "%",
                    "system": UCUM,
                    "code": "%",
                }
            }
            out.append(self.observation(f"lvef/{stage}", code, quantity, stage))
        return out


def _segment_loinc(model: SegmentModel, seg: SegmentResult) -> str | None:
    # The codes name 17-segment regions; the 16-segment model shares segments 1–16 with it, while the
    # 18-segment apical ring divides the apex differently, so it gets local codes only.
    if model is SegmentModel.EIGHTEEN:
        return None
    return WALL_MOTION_LOINC.get(seg.name)


def _scored(score: int | None, system: str, texts: dict[int, str]) -> dict[str, Any]:
    if score is None:
        return {
            "dataAbsentReason": {
                "coding": [{"system": DATA_ABSENT_REASON, "code": "unknown", "display": "Unknown"}],
                "text": "not visualised",
            }
        }
    text = texts.get(score, str(score))
    return {
        "valueCodeableConcept": {
            "coding": [{"system": system, "code": str(score), "display": text}],
            "text": f"{score} ({text})",
        }
    }


def _stage_component(stage: Stage) -> dict[str, Any]:
    return {
        "code": {
            "coding": [{"system": LOCAL_OBSERVATION, "code": "stage", "display": "Stress stage"}]
        },
        "valueCodeableConcept": {
            "coding": [{"system": LOCAL_STAGE, "code": stage.value, "display": stage_words(stage)}]
        },
    }
