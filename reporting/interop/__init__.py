"""Interfaces to the hospital: DICOM (SR and Encapsulated PDF), HL7 v2 ORU^R01 and, in
``reporting.export.fhir``, FHIR R4 transactions.

Every exporter takes typed inputs only: the :class:`~reporting.results.Analysis`, the report's PDF
bytes as made, and a :class:`~reporting.interop.release.Release` (the report's state, signer and the
version it replaces), so a report store can call them with a signed version. Modules: ``release``
(those inputs), ``from_file`` (the inputs from a study file: always unsigned), ``identity`` (order
and imaging-study identity, field limits, UIDs), ``words`` (the PDF's own sentences), ``dicom_header``
(shared DICOM modules), ``dicom_items`` (SR content items as bytes), ``dicom_sr``, ``dicom_pdf``,
``dicom_files`` (the two made and written together) and ``hl7``.
"""
