"""The DICOM export of one released report: the SR and the Encapsulated PDF, made and written together.

:func:`dicom_objects` checks the identity (field lengths, the imaging study's UID or an explicit
new study), derives the UIDs from the content (same release, same UIDs) and builds both objects;
:func:`write_dicom` writes them as ``<id>.sr.dcm`` and ``<id>.pdf.dcm``, both or neither.
"""

from __future__ import annotations

import datetime as dt
import io
import logging
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from pydicom import dcmwrite
from pydicom.dataset import Dataset

from reporting.files import all_or_nothing, write_atomic
from reporting.interop.dicom_pdf import pdf_dataset
from reporting.interop.dicom_sr import sr_dataset
from reporting.interop.identity import check_dicom_fields, content_digest, imaging_study, make_uid
from reporting.interop.release import Release
from reporting.results import Analysis
from reporting.settings import Settings, default_settings

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class DicomObjects:
    """The SR and the Encapsulated PDF of one release, and the warning to show, if any."""

    sr: Dataset
    pdf: Dataset
    warning: str | None


def dicom_objects(
    analysis: Analysis,
    pdf: bytes,
    release: Release,
    *,
    settings: Settings | None = None,
    new_study: bool = False,
    at: dt.datetime | None = None,
) -> DicomObjects:
    """Build the SR and the Encapsulated PDF of ``analysis`` as released in ``release``.

    ``at`` is the content date and time (default: the signing time of a signed release, else now).
    """
    settings = settings or default_settings()
    check_dicom_fields(analysis)
    study = imaging_study(analysis, settings, new_study=new_study)
    if at is None:
        at = release.signer.signed_at if release.signer else dt.datetime.now(dt.UTC)
    uid = study.study_instance_uid
    made = _uid_maker(analysis, pdf, release, settings, uid)

    sr = sr_dataset(
        analysis,
        release,
        study_instance_uid=uid,
        series_instance_uid=made("sr-series"),
        sop_instance_uid=made("sr"),
        at=at,
    )
    document = pdf_dataset(
        analysis,
        pdf,
        study_instance_uid=uid,
        series_instance_uid=made("pdf-series"),
        sop_instance_uid=made("pdf"),
        at=at,
    )
    return DicomObjects(sr=sr, pdf=document, warning=study.warning)


def _uid_maker(
    analysis: Analysis, pdf: bytes, release: Release, settings: Settings, study_uid: str
) -> Callable[[str], str]:
    digest = content_digest(analysis, pdf, release)

    def made(kind: str) -> str:
        return make_uid(settings, kind, study_uid, digest)

    return made


def sr_uids(
    analysis: Analysis,
    pdf: bytes,
    release: Release,
    *,
    settings: Settings | None = None,
    new_study: bool = False,
) -> tuple[str, str]:
    """The (Series, SOP Instance) UIDs of the SR :func:`dicom_objects` makes for this release.

    Derived from the content and the release alone, so the report store re-derives the UIDs of
    the SR sent for an earlier version (for the Predecessor Documents Sequence) from that
    version's stored record, PDF and release.
    """
    settings = settings or default_settings()
    study = imaging_study(analysis, settings, new_study=new_study)
    made = _uid_maker(analysis, pdf, release, settings, study.study_instance_uid)
    return made("sr-series"), made("sr")


def dicom_bytes(ds: Dataset) -> bytes:
    """``ds`` as a DICOM Part 10 file."""
    out = io.BytesIO()
    dcmwrite(out, ds, enforce_file_format=True)
    return out.getvalue()


def dicom_paths(analysis: Analysis, outdir: Path) -> list[Path]:
    """Where :func:`write_dicom` writes: ``<id>.sr.dcm`` and ``<id>.pdf.dcm``."""
    sid = analysis.study.id
    return [outdir / f"{sid}.sr.dcm", outdir / f"{sid}.pdf.dcm"]


def write_dicom(analysis: Analysis, objects: DicomObjects, outdir: Path) -> list[Path]:
    """Write both objects into ``outdir`` (both or neither); return the paths."""
    paths = dicom_paths(analysis, Path(outdir))
    contents = [dicom_bytes(objects.sr), dicom_bytes(objects.pdf)]
    with all_or_nothing(paths):
        for path, data in zip(paths, contents, strict=True):
            write_atomic(path, data)
    log.debug("wrote the DICOM SR and PDF of %s into %s", analysis.study.id, outdir)
    return paths
