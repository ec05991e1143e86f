"""Codes as data: one :class:`Code` type and the table ``data/codes.csv`` every export draws from.

Each row names a code by a key (``stage.peak``, ``segment.basal anterior``, ``wall_motion.3``), its
scheme (LOINC ``LN``, SNOMED CT ``SCT``, DICOM ``DCM``, ``UCUM`` or the lab's own ``LOCAL`` codes),
value, meaning and the source it was checked against. DCM and SCT rows were looked up by name in
pydicom's code dictionaries (``pydicom.sr.codedict``), and a test checks each value and meaning
there again. FHIR, DICOM and HL7 v2 each spell a scheme their own way (:func:`fhir_system`,
:func:`hl7_system`); a lab-local code has the system URI the lab configures
(``lab_code_system_uri``) and none otherwise: no made-up or placeholder system is ever written.
"""

from __future__ import annotations

import csv
import io
import logging
from dataclasses import dataclass
from functools import cache
from importlib import resources

from reporting.vocabulary import Vocabulary

log = logging.getLogger(__name__)


class Scheme(Vocabulary):
    """Coding scheme designator, as DICOM writes it."""

    LN = "LN"
    """LOINC."""
    SCT = "SCT"
    """SNOMED CT."""
    DCM = "DCM"
    """DICOM controlled terminology (PS3.16)."""
    UCUM = "UCUM"
    """Unified Code for Units of Measure."""
    LOCAL = "LOCAL"
    """The lab's own code system (system URI from lab settings)."""


FHIR_SYSTEMS: dict[Scheme, str] = {
    Scheme.LN: "http://loinc.org",
    Scheme.SCT: "http://snomed.info/sct",
    Scheme.DCM: "http://dicom.nema.org/resources/ontology/DCM",
    Scheme.UCUM: "http://unitsofmeasure.org",
}
"""FHIR code system URIs (FHIR R4 terminology, hl7.org/fhir/R4/terminologies-systems.html) [S]."""

HL7_SYSTEMS: dict[Scheme, str] = {
    Scheme.LN: "LN",
    Scheme.SCT: "SCT",
    Scheme.DCM: "DCM",
    Scheme.UCUM: "UCUM",
    Scheme.LOCAL: "L",
}
"""HL7 v2 coding system names (table 0396; ``L`` = local general code) [S]."""


@dataclass(frozen=True, slots=True)
class Code:
    """A coded concept: value, scheme and meaning (as DICOM's code sequence items hold them)."""

    value: str
    scheme: Scheme
    meaning: str


@dataclass(frozen=True, slots=True)
class CodeRow:
    """One row of ``codes.csv``: the code under its key, with the source it was checked against."""

    key: str
    code: Code
    source: str


@cache
def code_table() -> dict[str, CodeRow]:
    """Every row of ``data/codes.csv`` by key (read once)."""
    text = resources.files("reporting.data").joinpath("codes.csv").read_text(encoding="utf-8")
    table: dict[str, CodeRow] = {}
    for row in csv.DictReader(io.StringIO(text)):
        key = row["key"]
        if key in table:
            raise ValueError(f"codes.csv: key {key!r} appears twice")
        code = Code(row["value"], Scheme(row["scheme"]), row["meaning"])
        table[key] = CodeRow(key, code, row["source"])
    log.debug("loaded %d codes", len(table))
    return table


def code(key: str) -> Code:
    """The code under ``key`` (a ``KeyError`` names a programming error, not bad input)."""
    return code_table()[key].code


def fhir_system(scheme: Scheme, lab_code_system_uri: str | None) -> str | None:
    """The FHIR ``system`` of ``scheme``; a lab-local code's is the lab's URI, or ``None``."""
    if scheme is Scheme.LOCAL:
        return lab_code_system_uri
    return FHIR_SYSTEMS[scheme]


def hl7_system(scheme: Scheme) -> str:
    """The HL7 v2 name of ``scheme`` (CWE/CE third component)."""
    return HL7_SYSTEMS[scheme]
