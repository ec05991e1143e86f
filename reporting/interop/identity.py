"""Who and what a released result belongs to: the order, the imaging study, the clinicians, UIDs.

A result files beside the images only when it carries the imaging study's identity (Patient ID,
Study Instance UID, Accession Number; DICOM PS3.3 C.7.2.1). Without the imaging study's UID a DICOM export
is refused unless the caller asks for a new study, which then gets a UID under the lab's root (or
the UUID-derived ``2.25`` root) and a warning. Values longer than a DICOM field allows are refused
with their location, never cut. UIDs are derived from the study, the release and a digest of the
content, so re-sending the same version gives the same UIDs and a changed one gets new ones.
"""

from __future__ import annotations

import hashlib
import logging
import uuid
from dataclasses import dataclass

from pydicom.uid import generate_uid

from reporting.errors import InputError, InputErrors
from reporting.interop.release import Release
from reporting.model import ACCESSION_NUMBER_MAX, PERSON_NAME_MAX, Clinician
from reporting.results import Analysis
from reporting.settings import Settings

log = logging.getLogger(__name__)

STUDY_ID_MAX = 16
"""DICOM Study ID is SH, at most 16 characters (DICOM PS3.5 table 6.2-1)."""
_UID_NAMESPACE = uuid.uuid5(uuid.NAMESPACE_OID, "segreport")
NEW_STUDY_WARNING = (
    "the imaging study's Study Instance UID is not known: the result goes out under a new study "
    "UID ({uid}) and will file apart from the images"
)


def performer(analysis: Analysis) -> Clinician | None:
    """The clinician who performed the study: the order's, else the study's sonographer."""
    if analysis.order is not None and analysis.order.performing is not None:
        return analysis.order.performing
    name = analysis.study.sonographer
    return Clinician(name=name) if name else None


def interpreter(analysis: Analysis) -> Clinician | None:
    """The clinician who interpreted the study: the order's, else the study's reader."""
    if analysis.order is not None and analysis.order.interpreting is not None:
        return analysis.order.interpreting
    name = analysis.study.reader
    return Clinician(name=name) if name else None


def content_digest(analysis: Analysis, pdf: bytes, release: Release) -> str:
    """SHA-256 over the record, the PDF and the release: what makes one release distinct."""
    h = hashlib.sha256()
    for part in (analysis.model_dump_json().encode(), pdf, release.model_dump_json().encode()):
        h.update(len(part).to_bytes(8, "big"))
        h.update(part)
    return h.hexdigest()


def make_uid(settings: Settings, *parts: str) -> str:
    """A UID derived from ``parts``: under the lab's root, else under ``2.25`` (UUID-derived)."""
    if settings.lab_uid_root:
        return str(generate_uid(prefix=f"{settings.lab_uid_root}.", entropy_srcs=[*parts]))
    # pydicom ignores the entropy without a prefix; a name-based UUID keeps the UID reproducible.
    return f"2.25.{uuid.uuid5(_UID_NAMESPACE, '|'.join(parts)).int}"


@dataclass(frozen=True)
class StudyIdentity:
    """The imaging study a DICOM result files into."""

    study_instance_uid: str
    new_study: bool
    warning: str | None


def imaging_study(analysis: Analysis, settings: Settings, *, new_study: bool) -> StudyIdentity:
    """The imaging study's UID, or a new one when asked; refuse to guess otherwise."""
    uid = analysis.order.study_instance_uid if analysis.order is not None else None
    if uid is not None:
        return StudyIdentity(uid, new_study=False, warning=None)
    if not new_study:
        raise InputError(
            "order.study_instance_uid",
            "the imaging study's Study Instance UID is missing, so the DICOM result would not "
            "file with the images; add it, or pass --new-study to file the result as a study of "
            "its own",
        )
    made = make_uid(settings, "new-study", analysis.study.id)
    warning = NEW_STUDY_WARNING.format(uid=made)
    log.info(warning)
    return StudyIdentity(made, new_study=True, warning=warning)


def check_dicom_fields(analysis: Analysis) -> None:
    """Refuse values longer than the DICOM fields they go into (never cut them), and values with
    a backslash, which DICOM reads as the separator between values (PS3.5 6.4: the patient's
    name would become two names); never changed either."""
    problems: list[InputError] = []

    def limit(location: str, value: str | None, most: int, field: str) -> None:
        if value is not None and len(value) > most:
            problems.append(
                InputError(
                    location,
                    f"{value[:80]!r} is {len(value)} characters; DICOM {field} holds at most "
                    f"{most} (refused, not cut)",
                )
            )
        if value is not None and "\\" in value:
            problems.append(
                InputError(
                    location,
                    f"{value[:80]!r} holds a backslash, which DICOM {field} reads as a separator "
                    "between two values (refused, not changed)",
                )
            )

    study = analysis.study
    limit("study.id", study.id, STUDY_ID_MAX, "Study ID (SH)")
    limit("patient.name", analysis.patient.name, PERSON_NAME_MAX, "Patient's Name (PN)")
    limit(
        "study.referring_physician",
        study.referring_physician,
        PERSON_NAME_MAX,
        "Referring Physician's Name (PN)",
    )
    limit("study.reader", study.reader, PERSON_NAME_MAX, "Person Observer Name (PN)")
    limit("study.sonographer", study.sonographer, PERSON_NAME_MAX, "Performing Physician (PN)")
    limit("study.lab", study.lab, PERSON_NAME_MAX, "Institution Name (LO)")
    if analysis.order is not None:
        limit(
            "order.accession_number",
            analysis.order.accession_number,
            ACCESSION_NUMBER_MAX,
            "Accession Number (SH)",
        )
    if problems:
        raise InputErrors(problems)
