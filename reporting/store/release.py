"""Exports from the store: the inputs of the DICOM, HL7 and FHIR exporters for a signed version.

Only a signed version goes out. Its analysis is the stored signed record and its PDF the stored
signed PDF, byte for byte; the :class:`~reporting.interop.release.Release` is final for a first
signed version, and amended, corrected or appended (sent as a correction: HL7 result status C,
FHIR ``amended``/``corrected``/``appended``, a new SR instance) for a version that supersedes an
earlier signed one. The signer is the stored signature's (printed name, time, meaning) signing for
the study's lab, which DICOM requires as the Verifying Organization.

The SR of a replacing version lists the SR it replaces in the Predecessor Documents Sequence. The
exporters derive SR UIDs from the content and the release only (:func:`reporting.interop.dicom_files.sr_uids`),
so the predecessor's UIDs are derived again here from its own stored record, PDF and release
(and, for a predecessor that itself replaced one, recursively): the same UIDs the earlier export
sent, provided the lab's UID root and the ``--new-study`` choice are the same as then.
"""

from __future__ import annotations

import datetime as dt
import logging

from pydantic import ValidationError
from sqlalchemy.orm import Session

from reporting.errors import InputError
from reporting.interop.from_file import Released
from reporting.interop.release import Addendum, Predecessor, Release, ReportState, Signer
from reporting.results import Analysis
from reporting.settings import Settings, default_settings
from reporting.store import content, versions
from reporting.store.engine import Database
from reporting.store.errors import StoreError
from reporting.store.schema import SignatureRow, StudyRow, VersionRow
from reporting.store.status import VersionStatus, effective_status

log = logging.getLogger(__name__)

STATE_OF = {
    VersionStatus.FINAL: ReportState.FINAL,
    VersionStatus.AMENDED: ReportState.AMENDED,
    VersionStatus.CORRECTED: ReportState.CORRECTED,
    VersionStatus.APPENDED: ReportState.APPENDED,
}
"""Release state of a signed version from its status (FHIR R4 DiagnosticReport.status)."""


def release_from_store(
    db: Database,
    study_id: str,
    number: int | None = None,
    *,
    settings: Settings | None = None,
    new_study: bool = False,
) -> Released:
    """The signed version ``number`` (latest when None) of ``study_id``, ready for an exporter.

    Refuses an unsigned version with a located error. ``settings`` and ``new_study`` only serve
    to derive the predecessor's SR UIDs as the DICOM export derives them.
    """
    settings = settings or default_settings()
    with db.read() as session:
        study, row = versions.get_version(session, study_id, number)
        analysis, pdf, release = _signed(session, study, row, settings, new_study)
    log.debug("released %s v%d from the store as %s", study_id, row.version, release.state)
    return Released(analysis=analysis, pdf=pdf, release=release, settings=settings)


def _signed(
    session: Session, study: StudyRow, row: VersionRow, settings: Settings, new_study: bool
) -> tuple[Analysis, bytes, Release]:
    where = f"study {study.study_id} version {row.version}"
    sig = versions.signature_of(session, row)
    if sig is None:
        raise StoreError(
            where,
            "is not signed; only a signed version is exported "
            "(sign it with `segreport store sign`, or export the study file itself)",
        )
    analysis = Analysis.model_validate_json(bytes(sig.record_json))
    pdf = bytes(sig.pdf)
    state = STATE_OF[effective_status(VersionStatus(row.status), True)]
    predecessor = None
    if state.replaces:
        predecessor = _predecessor(session, study, row, settings, new_study)
    try:
        release = Release(
            state=state,
            version=row.version,
            signer=_signer(sig, analysis, where),
            predecessor=predecessor,
            addenda=tuple(Addendum(**a) for a in content.addenda_of(bytes(row.content))),
        )
    except ValidationError as exc:
        raise StoreError(where, exc.errors()[0]["msg"]) from None
    return analysis, pdf, release


class NoLab(StoreError):
    """A signed version names no lab, so it cannot be released as a verified report."""


def _signer(sig: SignatureRow, analysis: Analysis, where: str) -> Signer:
    lab = analysis.study.lab
    if not lab:
        raise NoLab(
            f"{where}: study.lab",
            "a signed export names the lab as the verifying organization (DICOM Verifying "
            "Organization) and this signed version names none; a signed version never changes, "
            "so amend the study with its lab (`store amend` with the study's lab, or with "
            "--settings naming lab_name) and export the amendment",
        )
    try:
        return Signer(
            name=sig.signer_name,
            signed_at=dt.datetime.fromisoformat(sig.signed_at),
            meaning=sig.meaning,
            organization=lab,
        )
    except ValidationError as exc:
        error = exc.errors()[0]
        field = ".".join(str(p) for p in error["loc"])
        raise StoreError(f"{where}: signer {field}", error["msg"]) from None


def _predecessor(
    session: Session, study: StudyRow, row: VersionRow, settings: Settings, new_study: bool
) -> Predecessor:
    from reporting.interop.dicom_files import sr_uids

    if row.parent_version is None:  # an amendment always names the signed version it supersedes
        raise StoreError(
            f"study {study.study_id} version {row.version}", "names no version it replaces"
        )
    _, parent = versions.get_version(session, study.study_id, row.parent_version)
    series: str | None = None
    instance: str | None = None
    released = True
    try:
        analysis, pdf, release = _signed(session, study, parent, settings, new_study)
        series, instance = sr_uids(analysis, pdf, release, settings=settings, new_study=new_study)
    except NoLab:
        # the replaced version named no lab, so it was never released as an SR to refer to; the
        # amendment that names the lab is released on its own
        released = False
    except InputError:
        # no imaging study UID and no --new-study: the DICOM export refuses before it needs them
        log.debug("no SR UIDs for %s v%d", study.study_id, parent.version)
    return Predecessor(
        version=parent.version,
        reason=row.reason or "superseded",
        sr_sop_instance_uid=instance,
        sr_series_instance_uid=series,
        released=released,
    )
