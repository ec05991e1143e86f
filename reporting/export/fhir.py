"""HL7 FHIR R4 export: a released report as a ``transaction`` Bundle a server accepts.

Every entry has a ``fullUrl`` (``urn:uuid:`` derived from the study id, so the same analysis gives
the same bytes) and a ``request``. The DiagnosticReport and its Observations are **conditional
updates** on their identifiers (``PUT DiagnosticReport?identifier=…``), so a corrected version
replaces what was sent before (a conditional create would do nothing once the report exists;
FHIR R4 http.html conditional update). Patient, Practitioners and the ServiceRequest are conditional creates on their identifiers
(plain creates when there is none).

- Patient (unless de-identified: then the subject is a pseudonymous identifier only).
- Practitioners: the performing clinician as ``performer`` and the interpreting one (the signer of a
  signed release) as ``resultsInterpreter``.
- ServiceRequest from the order numbers (placer, filler, accession; identifier types of HL7 table
  0203), which the report is ``basedOn``.
- DiagnosticReport: status from the :class:`~reporting.interop.release.Release` (file mode:
  preliminary), ``conclusion`` in the PDF's own words (its Impression section), the PDF as
  ``presentedForm`` with its base64 SHA-1 ``hash``, and the cautions in the narrative ``text`` (R4
  has no ``note`` on DiagnosticReport).
- Provenance, for a version that supersedes an earlier signed one (an update of an id derived from the
  version, so sending the bundle again replaces it): the revision (v3-DataOperation
  UPDATE) of the DiagnosticReport, its signer and the reason, in the words the signed PDF prints on
  page 1 (also a paragraph of the report's narrative).
- Observations (:mod:`reporting.export.fhir_observations`): per stage and segment the wall motion
  and perfusion score, per stage WMSI and LVEF. **The stage is carried explicitly** in a component
  coded DCM 109055 "Protocol Stage" whose value is the SNOMED CT stress phase of DICOM CID 3207.

Codes come from ``data/codes.csv``. Lab-local codes use the lab's ``lab_code_system_uri`` and
travel as text only without it; identifiers use ``lab_identifier_system_uri`` and carry a value only
without it. No made-up or placeholder system is written.
"""

from __future__ import annotations

import base64
import hashlib
import html
import uuid
from typing import Any
from urllib.parse import quote

from pydantic_core import to_json

from reporting.codes import Code, code, fhir_system
from reporting.export.fhir_observations import FhirContext, observations
from reporting.interop import words
from reporting.interop.identity import interpreter, performer
from reporting.interop.release import Release, ReportState
from reporting.model import Clinician, Sex
from reporting.results import Analysis, DiagnosticStatus
from reporting.settings import Settings, default_settings

DIAGNOSTIC_SERVICE_SECTION = "http://terminology.hl7.org/CodeSystem/v2-0074"
IDENTIFIER_TYPE = "http://terminology.hl7.org/CodeSystem/v2-0203"
DATA_OPERATION = "http://terminology.hl7.org/CodeSystem/v3-DataOperation"
XHTML = "http://www.w3.org/1999/xhtml"
FHIR_STATUS = {
    ReportState.PRELIMINARY: "preliminary",
    ReportState.FINAL: "final",
    ReportState.AMENDED: "amended",
    ReportState.CORRECTED: "corrected",
    ReportState.APPENDED: "appended",
}
"""DiagnosticReport/Observation status from the release (FHIR R4 DiagnosticReport.status) [S]."""
OBSERVATION_STATUS = {ReportState.APPENDED: "final"}
"""Observation.status has no ``appended`` (FHIR R4 observation-status): an addendum adds text to
the report and leaves every observation as it was signed, so they stay ``final``."""
STATUS_TEXT = {
    DiagnosticStatus.ISCHEMIA: "Inducible ischaemia",
    DiagnosticStatus.NO_ISCHEMIA: "No inducible ischaemia",
    DiagnosticStatus.NON_DIAGNOSTIC: "Non-diagnostic for ischaemia",
}
_GENDER = {Sex.FEMALE: "female", Sex.MALE: "male", Sex.OTHER: "other"}
_NAMESPACE = uuid.uuid5(uuid.NAMESPACE_OID, "segreport.fhir")


def bundle(
    analysis: Analysis,
    *,
    pdf: bytes | None = None,
    release: Release | None = None,
    settings: Settings | None = None,
) -> dict[str, Any]:
    """The FHIR R4 transaction Bundle of ``analysis`` as released (default: unsigned)."""
    return _Builder(analysis, release or Release.unsigned(), settings or default_settings()).bundle(
        pdf
    )


def bundle_json(
    analysis: Analysis,
    *,
    pdf: bytes | None = None,
    release: Release | None = None,
    settings: Settings | None = None,
) -> str:
    """The Bundle as indented UTF-8 JSON text ending in a newline (byte-stable).

    pydantic-core's serializer writes it: the standard library's indenting encoder is pure Python
    and took several times the budget of the whole export.
    """
    data = bundle(analysis, pdf=pdf, release=release, settings=settings)
    return to_json(data, indent=2).decode("utf-8") + "\n"


def coding(c: Code, lab_code_system_uri: str | None) -> dict[str, str] | None:
    """A Coding of ``c``, or ``None`` for a lab-local code when the lab configured no system."""
    system = fhir_system(c.scheme, lab_code_system_uri)
    if system is None:
        return None
    return {"system": system, "code": c.value, "display": c.meaning}


def concept(codes: list[Code], text: str | None, lab_code_system_uri: str | None) -> dict[str, Any]:
    """A CodeableConcept of ``codes`` (lab-local ones dropped without a system) and ``text``."""
    codings = [c for c in (coding(x, lab_code_system_uri) for x in codes) if c is not None]
    out: dict[str, Any] = {}
    if codings:
        out["coding"] = codings
    if text is not None:
        out["text"] = text
    return out


class _Builder:
    def __init__(self, analysis: Analysis, release: Release, settings: Settings) -> None:
        self.a = analysis
        self.release = release
        self.local = settings.lab_code_system_uri
        self.ids = settings.lab_identifier_system_uri
        self.ns = uuid.uuid5(_NAMESPACE, analysis.study.id)
        self.status = FHIR_STATUS[release.state]
        self.entries: list[dict[str, Any]] = []

    def url(self, name: str) -> str:
        return f"urn:uuid:{uuid.uuid5(self.ns, name)}"

    def identifier(self, kind: str, value: str) -> dict[str, str]:
        if self.ids is None:
            return {"value": value}
        return {"system": f"{self.ids.rstrip('/')}/{kind}", "value": value}

    def add(self, url: str, resource: dict[str, Any], request: dict[str, str]) -> None:
        resource = {"resourceType": resource.pop("resourceType"), "id": url[9:], **resource}
        self.entries.append({"fullUrl": url, "resource": resource, "request": request})

    def bundle(self, pdf: bytes | None) -> dict[str, Any]:
        subject = self.patient()
        performer_ref = self.practitioner(performer(self.a))
        reader = interpreter(self.a)
        if self.release.signer is not None:
            signer = self.release.signer
            reader = Clinician(name=signer.name, id=signer.id)
        interpreter_ref = self.practitioner(reader)
        order_ref = self.service_request(subject)
        context = FhirContext(
            analysis=self.a,
            status=OBSERVATION_STATUS.get(self.release.state, self.status),
            subject=subject,
            performer=performer_ref,
            lab_code_system_uri=self.local,
            url=self.url,
            identifier=self.identifier,
        )
        obs = observations(context)
        report_url = self.url("diagnostic-report")
        report = self.report(obs, subject, performer_ref, interpreter_ref, order_ref, pdf)
        self.add(report_url, report, _conditional("DiagnosticReport", report["identifier"][0]))
        # The report comes first for a reader; a server orders a transaction by method anyway.
        self.entries.insert(0, self.entries.pop())
        self.provenance(report_url, interpreter_ref)
        for url, resource in obs:
            self.add(url, resource, _conditional("Observation", resource["identifier"][0]))
        return {
            "resourceType": "Bundle",
            "id": str(uuid.uuid5(self.ns, "bundle")),
            "type": "transaction",
            "entry": self.entries,
        }

    def patient(self) -> dict[str, Any] | None:
        p = self.a.patient
        if self.a.study.deidentified:
            if p.id is None:
                return None
            return {"identifier": self.identifier("pseudonymous-patient", p.id)}
        url = self.url("patient")
        resource: dict[str, Any] = {"resourceType": "Patient"}
        request: dict[str, str] = {"method": "POST", "url": "Patient"}
        if p.id is not None:
            ident = self.identifier("patient", p.id)
            resource["identifier"] = [ident]
            request["ifNoneExist"] = _search(ident)
        if p.name is not None:
            resource["name"] = [{"text": p.name}]
        if p.sex is not None:
            resource["gender"] = _GENDER[p.sex]
        if p.birth_date is not None:
            resource["birthDate"] = p.birth_date.isoformat()
        self.add(url, resource, request)
        return {"reference": url}

    def practitioner(self, person: Clinician | None) -> dict[str, Any] | None:
        if person is None or self.a.study.deidentified:
            return None
        url = self.url(f"practitioner/{person.name}/{person.id}")  # one entry per person
        if any(e["fullUrl"] == url for e in self.entries):
            return {"reference": url, "display": person.name}
        resource: dict[str, Any] = {"resourceType": "Practitioner"}
        request: dict[str, str] = {"method": "POST", "url": "Practitioner"}
        if person.id is not None:
            ident = self.identifier("practitioner", person.id)
            resource["identifier"] = [ident]
            request["ifNoneExist"] = _search(ident)
        resource["name"] = [{"text": person.name}]
        self.add(url, resource, request)
        return {"reference": url, "display": person.name}

    def service_request(self, subject: dict[str, Any] | None) -> dict[str, Any] | None:
        order = self.a.order
        if order is None or self.a.study.deidentified:
            return None
        idents = []
        for kind, type_code, value in (
            ("placer-order", "PLAC", order.placer_order_number),
            ("filler-order", "FILL", order.filler_order_number),
            ("accession", "ACSN", order.accession_number),
        ):
            if value is not None:
                ident: dict[str, Any] = {
                    "type": {"coding": [{"system": IDENTIFIER_TYPE, "code": type_code}]},
                    **self.identifier(kind, value),
                }
                idents.append(ident)
        if not idents or subject is None:
            return None
        url = self.url("service-request")
        protocol = code(f"protocol.{self.a.protocol.value}")
        resource = {
            "resourceType": "ServiceRequest",
            "identifier": idents,
            "status": "completed",
            "intent": "order",
            "code": concept([protocol], None, self.local),
            "subject": subject,
        }
        first = {k: v for k, v in idents[0].items() if k != "type"}
        self.add(
            url,
            resource,
            {"method": "POST", "url": "ServiceRequest", "ifNoneExist": _search(first)},
        )
        return {"reference": url}

    def report(
        self,
        obs: list[tuple[str, dict[str, Any]]],
        subject: dict[str, Any] | None,
        performer_ref: dict[str, Any] | None,
        interpreter_ref: dict[str, Any] | None,
        order_ref: dict[str, Any] | None,
        pdf: bytes | None,
    ) -> dict[str, Any]:
        a = self.a
        status = a.conclusion.status
        resource: dict[str, Any] = {
            "resourceType": "DiagnosticReport",
            "text": {"status": "generated", "div": self.narrative()},
            "identifier": [self.identifier("diagnostic-report", a.study.id)],
        }
        if order_ref is not None:
            resource["basedOn"] = [order_ref]
        resource["status"] = self.status
        resource["category"] = [
            {"coding": [{"system": DIAGNOSTIC_SERVICE_SECTION, "code": "CUS", "display": "Cardiac Ultrasound"}]}
        ]  # fmt: skip
        resource["code"] = concept(
            [code("report_title")],
            f"Stress echocardiography report ({a.protocol.value})",
            self.local,
        )
        if subject is not None:
            resource["subject"] = subject
        resource["effectiveDateTime"] = (
            a.study.date.isoformat() if a.study.date is not None else f"{a.study.year:04d}"
        )
        if self.release.signer is not None:
            resource["issued"] = self.release.signer.signed_at.isoformat()
        if performer_ref is not None:
            resource["performer"] = [performer_ref]
        if interpreter_ref is not None:
            resource["resultsInterpreter"] = [interpreter_ref]
        resource["result"] = [{"reference": url} for url, _ in obs]
        resource["conclusion"] = words.conclusion_text(a)
        status_codes = [code(f"status.{status.value}")]
        if status is DiagnosticStatus.ISCHEMIA:
            status_codes.append(code("ischemia"))
        resource["conclusionCode"] = [concept(status_codes, STATUS_TEXT[status], self.local)]
        if pdf is not None:
            resource["presentedForm"] = [
                {
                    "contentType": "application/pdf",
                    "data": base64.b64encode(pdf).decode("ascii"),
                    "size": len(pdf),
                    "hash": base64.b64encode(hashlib.sha1(pdf).digest()).decode("ascii"),
                    "title": f"{a.study.id}.pdf",
                }
            ]
        return resource

    def provenance(self, report_url: str, signer_ref: dict[str, Any] | None) -> None:
        """For a version that supersedes another: a Provenance of the report naming the revision
        (v3-DataOperation UPDATE), who signed it and why, in the words of the signed PDF."""
        text = words.supersession_text(self.a, self.release)
        if text is None or signer_ref is None or self.release.signer is None:
            return
        resource = {
            "resourceType": "Provenance",
            "target": [{"reference": report_url}],
            "recorded": self.release.signer.signed_at.isoformat(),
            "activity": {"coding": [{"system": DATA_OPERATION, "code": "UPDATE", "display": "revise"}]},
            "reason": [{"text": text}],
            "agent": [{"who": signer_ref}],
        }  # fmt: skip
        # One Provenance per version, its id derived from the version: sent again (after a
        # timeout, say), the update replaces it instead of adding a second one.
        url = self.url(f"provenance/v{self.release.version}")
        self.add(url, resource, {"method": "PUT", "url": f"Provenance/{url[9:]}"})

    def narrative(self) -> str:
        """The narrative ``text``: the PDF's headline, for a superseding version the line saying
        which version it replaces and why and its addenda, then the cautions (R4 has no note)."""
        paragraphs = [
            words.headline(self.a),
            *words.release_notes(self.a, self.release),
            *self.a.cautions,
        ]
        body = "".join(f"<p>{html.escape(p, quote=False)}</p>" for p in paragraphs)
        return f'<div xmlns="{XHTML}">{body}</div>'


def _search(identifier: dict[str, Any]) -> str:
    """The search ``identifier=[system|]value``, percent-encoded where a URL needs it."""
    value = identifier["value"]
    token = f"{identifier['system']}|{value}" if "system" in identifier else value
    return f"identifier={quote(token, safe=':/|-._~')}"


def _conditional(kind: str, identifier: dict[str, Any]) -> dict[str, str]:
    return {"method": "PUT", "url": f"{kind}?{_search(identifier)}"}
