"""The DICOM modules an SR and an Encapsulated PDF share: patient, study, equipment, SOP common.

Both objects carry the imaging study's patient and study identity (Patient ID, Study Instance UID,
Accession Number; DICOM PS3.3 C.7.2.1) so they file beside the images, and the order numbers in the
Referenced Request Sequence. Text is UTF-8 (``ISO_IR 192``). Values are checked against their
field lengths before this module runs (:func:`reporting.interop.identity.check_dicom_fields`).
"""

from __future__ import annotations

import datetime as dt

from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.sequence import Sequence
from pydicom.uid import PYDICOM_IMPLEMENTATION_UID, UID, ExplicitVRLittleEndian

from reporting import __version__
from reporting.model import Sex
from reporting.results import Analysis

MANUFACTURER = "segreport"
_SEX = {Sex.FEMALE: "F", Sex.MALE: "M", Sex.OTHER: "O"}


def dicom_date(value: dt.date | None) -> str:
    return "" if value is None else value.strftime("%Y%m%d")


def dicom_time(value: dt.datetime) -> str:
    return value.strftime("%H%M%S")


def new_dataset(sop_class_uid: str, sop_instance_uid: str) -> Dataset:
    """An empty dataset with its file meta information (explicit VR little endian)."""
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = UID(sop_class_uid)
    meta.MediaStorageSOPInstanceUID = UID(sop_instance_uid)
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    meta.ImplementationClassUID = PYDICOM_IMPLEMENTATION_UID
    meta.ImplementationVersionName = f"SEGREPORT_{__version__}"[:16]
    ds = Dataset()
    ds.file_meta = meta
    ds.SpecificCharacterSet = "ISO_IR 192"
    ds.SOPClassUID = sop_class_uid
    ds.SOPInstanceUID = sop_instance_uid
    return ds


def add_patient_and_study(ds: Dataset, analysis: Analysis, study_instance_uid: str) -> None:
    """Patient and General Study modules: the imaging study's identity."""
    patient = analysis.patient
    ds.PatientName = patient.name or ""
    ds.PatientID = patient.id or ""
    ds.PatientBirthDate = dicom_date(patient.birth_date)
    ds.PatientSex = _SEX[patient.sex] if patient.sex is not None else ""
    study = analysis.study
    order = analysis.order
    ds.StudyInstanceUID = study_instance_uid
    ds.StudyDate = dicom_date(study.date)
    ds.StudyTime = ""
    ds.ReferringPhysicianName = study.referring_physician or ""
    ds.StudyID = study.id
    ds.AccessionNumber = (order.accession_number if order else None) or ""


def add_equipment(ds: Dataset, analysis: Analysis) -> None:
    """General Equipment module: the program that made the object, and the lab."""
    ds.Manufacturer = MANUFACTURER
    ds.SoftwareVersions = __version__
    if analysis.study.lab:
        ds.InstitutionName = analysis.study.lab


def add_series(ds: Dataset, modality: str, series_uid: str, number: int) -> None:
    ds.Modality = modality
    ds.SeriesInstanceUID = series_uid
    ds.SeriesNumber = number


def add_content_time(ds: Dataset, at: dt.datetime) -> None:
    ds.InstanceNumber = 1
    ds.ContentDate = at.strftime("%Y%m%d")
    ds.ContentTime = dicom_time(at)
    ds.InstanceCreationDate = ds.ContentDate
    ds.InstanceCreationTime = ds.ContentTime


def referenced_request(analysis: Analysis, study_instance_uid: str) -> Sequence | None:
    """Referenced Request Sequence item from the order numbers, or ``None`` without an order."""
    order = analysis.order
    if order is None or not (
        order.accession_number or order.placer_order_number or order.filler_order_number
    ):
        return None
    item = Dataset()
    item.StudyInstanceUID = study_instance_uid
    item.ReferencedStudySequence = Sequence()
    item.AccessionNumber = order.accession_number or ""
    item.PlacerOrderNumberImagingServiceRequest = order.placer_order_number or ""
    item.FillerOrderNumberImagingServiceRequest = order.filler_order_number or ""
    item.RequestedProcedureID = ""
    item.RequestedProcedureDescription = ""
    item.RequestedProcedureCodeSequence = Sequence()
    return Sequence([item])
