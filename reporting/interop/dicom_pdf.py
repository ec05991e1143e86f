"""DICOM Encapsulated PDF of the report: the PDF byte for byte, stored beside the images.

The PDF goes into Encapsulated Document (OB), padded to even length as DICOM requires; Encapsulated
Document Length gives the true size, so a reader compares bytes up to it (DICOM PS3.3 A.45.1). The object
carries the same patient and study identity as the SR, a document title and the report's concept
name (LOINC, from ``data/codes.csv``).
"""

from __future__ import annotations

import datetime as dt

from pydicom.dataset import Dataset
from pydicom.sequence import Sequence
from pydicom.uid import EncapsulatedPDFStorage

from reporting.codes import code
from reporting.interop import dicom_header as header
from reporting.results import Analysis

PDF_SERIES_NUMBER = 902
"""Series number of the encapsulated PDF."""


def pdf_dataset(
    analysis: Analysis,
    pdf: bytes,
    *,
    study_instance_uid: str,
    series_instance_uid: str,
    sop_instance_uid: str,
    at: dt.datetime,
) -> Dataset:
    """The Encapsulated PDF of ``pdf`` filed in the imaging study."""
    ds = header.new_dataset(EncapsulatedPDFStorage, sop_instance_uid)
    header.add_patient_and_study(ds, analysis, study_instance_uid)
    header.add_series(ds, "DOC", series_instance_uid, PDF_SERIES_NUMBER)
    header.add_equipment(ds, analysis)
    ds.ConversionType = "WSD"  # made on a workstation, not digitised (SC Equipment module)
    header.add_content_time(ds, at)
    ds.AcquisitionDateTime = at.strftime("%Y%m%d%H%M%S")
    ds.BurnedInAnnotation = "YES"  # the report names the patient
    ds.DocumentTitle = f"Stress echocardiography report {analysis.study.id}"
    title = code("report_title")
    concept = Dataset()
    concept.CodeValue = title.value
    concept.CodingSchemeDesignator = title.scheme.value
    concept.CodeMeaning = title.meaning
    ds.ConceptNameCodeSequence = Sequence([concept])
    ds.MIMETypeOfEncapsulatedDocument = "application/pdf"
    ds.EncapsulatedDocumentLength = len(pdf)
    ds.EncapsulatedDocument = pdf + b"\0" if len(pdf) % 2 else pdf
    return ds
