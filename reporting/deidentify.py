"""De-identification of an analysis for research extracts (HIPAA Safe Harbor).

:func:`deidentify` removes from an :class:`~reporting.results.Analysis` the Safe Harbor identifiers a
study file can hold (45 CFR 164.514(b)(2)(i)): names (patient, reader, sonographer, referring
doctor), record numbers, every date element finer than the year (study date → year; birth date
dropped), ages over 89 (grouped as ``90+``, with the heart-rate figures that would reveal the exact
age) and, unless ``keep_text``, the free text (indication, comments, symptoms, agent description),
which may hold any of them. The lab name and address go too: an address is geographic detail, and a
lab together with a year narrows the population. The name of the time-intensity curve file, often
named after the study or the patient, is replaced wherever it appears.

Study and patient ids become keyed hashes (HMAC-SHA256 with a secret key, truncated), so repeat
extracts made with the same key link the same study and patient while the key holder alone can
re-link them to the source. Note that 45 CFR 164.514(c) lets a covered entity keep a
re-identification code only if it is not *derived from* identifiers; a keyed hash is derived, so
whether this satisfies (c) is a decision for the privacy officer: keep the key inside the covered
entity and never release it with an extract.
"""

from __future__ import annotations

import hashlib
import hmac
import logging
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any, TypeVar

from pydantic import BaseModel

from reporting.errors import ReportingError
from reporting.results import Analysis, PatientSummary, StressResult, StudyHeader

log = logging.getLogger(__name__)

M = TypeVar("M", bound=BaseModel)

KEY_ENV = "SEGREPORT_DEID_KEY"
"""Environment variable holding the de-identification key (used when no key file is given)."""
MIN_KEY_BYTES = 16
"""Shortest key accepted: a short key could be guessed and the hashes reversed by trying ids."""
OLDEST_EXACT_AGE = 89
"""Ages above this are grouped as 90+ (45 CFR 164.514(b)(2)(i)(C))."""
AGE_GROUP_90_PLUS = "90+"
HASH_HEX_DIGITS = 24
"""96 bits of the HMAC: collisions are negligible for any registry, ids stay short in file names."""

CURVE_FILE_PLACEHOLDER = "curve file"
"""Stands for the time-intensity curve file's name, which may hold identifiers."""
STUDY_PREFIX = "S-"
PATIENT_PREFIX = "P-"


class DeidentificationKeyError(ReportingError):
    """No usable de-identification key."""


def load_key(key_file: Path | None = None, *, environ: Mapping[str, str] | None = None) -> bytes:
    """The secret key: the bytes of ``key_file`` (trailing newline removed), else ``$SEGREPORT_DEID_KEY``.

    Raises :class:`DeidentificationKeyError` when neither is set or the key is shorter than
    :data:`MIN_KEY_BYTES`.
    """
    env = os.environ if environ is None else environ
    if key_file is not None:
        try:
            key = Path(key_file).read_bytes().rstrip(b"\r\n")
        except OSError as exc:
            raise DeidentificationKeyError(
                f"{key_file}: cannot read the de-identification key file: {exc.strerror or exc}"
            ) from None
        where = str(key_file)
    elif env.get(KEY_ENV):
        key = env[KEY_ENV].encode("utf-8")
        where = KEY_ENV
    else:
        raise DeidentificationKeyError(
            f"de-identification needs a secret key: set the environment variable {KEY_ENV} "
            "or give a key file (--deid-key-file)"
        )
    if len(key) < MIN_KEY_BYTES:
        raise DeidentificationKeyError(
            f"{where}: the de-identification key is {len(key)} bytes; use at least {MIN_KEY_BYTES}"
        )
    return key


def keyed_hash(key: bytes, kind: str, value: str) -> str:
    """Hex HMAC-SHA256 of ``value`` under ``key``, separated by ``kind`` (study, patient, file…)."""
    message = f"segreport:{kind}\x00{value}".encode()
    return hmac.new(key, message, hashlib.sha256).hexdigest()[:HASH_HEX_DIGITS]


def pseudonymous_study_id(key: bytes, study_id: str) -> str:
    """The study id used in a de-identified record and its file names (``S-`` + 24 hex digits)."""
    return STUDY_PREFIX + keyed_hash(key, "study", study_id)


def pseudonymous_patient_id(key: bytes, patient_id: str) -> str:
    """The patient id used in a de-identified record (``P-`` + 24 hex digits)."""
    return PATIENT_PREFIX + keyed_hash(key, "patient", patient_id)


def key_fingerprint(key: bytes) -> str:
    """A short value that tells keys apart without revealing them (for re-run bookkeeping)."""
    return keyed_hash(key, "fingerprint", "")[:16]


def deidentify(analysis: Analysis, key: bytes, *, keep_text: bool = False) -> Analysis:
    """A copy of ``analysis`` without Safe Harbor identifiers (see the module docstring).

    Scores, indices, responses, conclusions and computed notes are kept: they are derived from the
    scores alone. ``keep_text`` keeps the indication, comments, symptoms and agent description;
    the caller must then make sure that text holds no identifier.
    """
    if analysis.study.deidentified:
        return analysis
    study = analysis.study
    header = StudyHeader(
        id=pseudonymous_study_id(key, study.id),
        date=None,
        year=study.date.year if study.date is not None else study.year,
        lab=None,
        lab_address=None,
        reader=None,
        sonographer=None,
        referring_physician=None,
        report_status=study.report_status,
        indication=study.indication if keep_text else None,
        comments=study.comments if keep_text else None,
        impression_basis_sha256=study.impression_basis_sha256,  # a hash of coded findings
        kept_notes=list(study.kept_notes),
        deidentified=True,
    )
    patient = analysis.patient
    age = patient.age_years
    grouped = age is not None and age > OLDEST_EXACT_AGE
    summary = PatientSummary(
        id=pseudonymous_patient_id(key, patient.id) if patient.id is not None else None,
        name=None,
        birth_date=None,
        age_years=None if grouped else age,
        age_group=AGE_GROUP_90_PLUS if grouped else None,
        sex=patient.sex,
    )
    haemodynamics = {
        stage: data.model_copy(
            update={
                "symptoms": data.symptoms if keep_text else None,
                "hr_percent_of_predicted": None if grouped else data.hr_percent_of_predicted,
            }
        )
        for stage, data in analysis.haemodynamics.items()
    }
    kinetics = analysis.kinetics
    if kinetics is not None and kinetics.source_file:
        # A lab names curve files after the study or the patient; the name also sits in locations.
        kinetics = _replaced(kinetics, kinetics.source_file, CURVE_FILE_PLACEHOLDER)
        kinetics = kinetics.model_copy(update={"source_file": None})
    result = analysis.model_copy(
        update={
            "study": header,
            "patient": summary,
            "haemodynamics": haemodynamics,
            "contrast_agent": analysis.contrast_agent if keep_text else None,
            "stress": _stress_without_age(analysis.stress) if grouped else analysis.stress,
            "kinetics": kinetics,
        }
    )
    # The computed findings text quotes heart-rate figures that can give a withheld age back:
    # write it again from the de-identified values.
    from reporting.render.narrative import computed_impression_text

    return result.model_copy(update={"computed_impression": computed_impression_text(result)})


def _replaced(model: M, old: str, new: str) -> M:
    """A copy of ``model`` with ``old`` replaced by ``new`` in every string it holds."""

    def scrub(value: Any) -> Any:
        if isinstance(value, str):
            return value.replace(old, new)
        if isinstance(value, list):
            return [scrub(v) for v in value]
        if isinstance(value, dict):
            return {k: scrub(v) for k, v in value.items()}
        return value

    return type(model).model_validate(scrub(model.model_dump(mode="json")))


def _stress_without_age(result: StressResult) -> StressResult:
    # 220 − age, the target and the % of predicted each give the exact age back.
    return result.model_copy(
        update={
            "age_years": None,
            "age_predicted_max_hr_bpm": None,
            "target_hr_bpm": None,
            "peak_hr_percent_of_predicted": None,
            "adequacy_note": (
                "Age withheld (90 or over) in this de-identified record, so the heart-rate target "
                "is not shown; adequacy was judged on the exact age."
            ),
        }
    )
