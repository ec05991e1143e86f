"""Input models: a stress-echo study as the reader enters it.

A :class:`Study` is valid once built: segment numbers exist in the declared segment model, scores
lie on the declared scales, stages are put in protocol order (a file may list them in any order:
the names fix the order) and the study id is safe to use in a file name. Each field's ``description`` becomes the published JSON Schema of the study file
(``schemas/study.schema.json``). Scores are entered either as one character per segment
(``"111111 111111 1111 1"``, ``x`` for not visualised) or as a mapping of segment number to score.
"""

import datetime as dt
import re
from collections.abc import Mapping
from typing import Annotated, Any, Literal, Self

from pydantic import (
    AfterValidator,
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    ModelWrapValidatorHandler,
    ValidationError,
    WithJsonSchema,
    model_validator,
)
from pydantic_core import ErrorDetails, InitErrorDetails, PydanticCustomError

from reporting.notes import NoteKind
from reporting.procedure import ImageQuality, Procedure, Vasodilator
from reporting.segments import Ring, SegmentModel, segments_of
from reporting.vocabulary import Vocabulary
from reporting.wording import number_ranges

STUDY_SCHEMA_VERSION = 1
NOT_VISUALISED = "x"


class Stage(Vocabulary):
    """Imaging stage of a stress study, in protocol order."""

    REST = "rest"
    """Baseline, before stress."""
    LOW_DOSE = "low_dose"
    """Low-dose dobutamine (or low workload): the stage that shows contractile reserve."""
    PEAK = "peak"
    """Peak stress."""
    RECOVERY = "recovery"
    """After stress."""


STAGE_ORDER: tuple[Stage, ...] = tuple(Stage)
_STAGE_VALUES: list[str] = [s.value for s in Stage]
MAX_AGE_YEARS = 120
STRESS_STAGES: tuple[Stage, ...] = (Stage.LOW_DOSE, Stage.PEAK)


class Protocol(Vocabulary):
    """Kind of stress."""

    DOBUTAMINE = "dobutamine"
    """Graded dobutamine infusion, atropine as needed."""
    TREADMILL = "treadmill"
    """Treadmill exercise."""
    BICYCLE = "bicycle"
    """Upright or supine bicycle exercise."""
    VASODILATOR = "vasodilator"
    """Vasodilator stress; heart-rate targets do not apply."""
    PACING = "pacing"
    """Atrial or device pacing to a target heart rate."""


EXERCISE_PROTOCOLS = frozenset({Protocol.TREADMILL, Protocol.BICYCLE})


class Sex(Vocabulary):
    """Patient sex as recorded."""

    FEMALE = "female"
    """Female."""
    MALE = "male"
    """Male."""
    OTHER = "other"
    """Other or not stated."""


class Administration(Vocabulary):
    """How the ultrasound-enhancing agent was given."""

    INFUSION = "infusion"
    """Continuous infusion: a steady state, needed for quantitative replenishment."""
    BOLUS = "bolus"
    """Bolus injections: concentration changes over time."""


class ReportStatus(Vocabulary):
    """Sign-off state of the report."""

    PRELIMINARY = "preliminary"
    """Not yet signed by the reading physician."""
    FINAL = "final"
    """Signed by the reading physician."""


_ID_PATTERN = re.compile(r"^[A-Za-z0-9._-]{1,64}$")
_FORBIDDEN_IDS = frozenset({".", ".."})


def _check_id(value: Any) -> Any:
    if isinstance(value, bool | int | float):
        # YAML reads 0012 as 10 and 12:30 as 750: an id must be written as text.
        raise PydanticCustomError(
            "id_not_text",
            "id {value} was read as a number; put the id in quotes",
            {"value": repr(value)},
        )
    if isinstance(value, str) and (value in _FORBIDDEN_IDS or not _ID_PATTERN.fullmatch(value)):
        raise PydanticCustomError(
            "unsafe_id",
            "id {value} must be 1–64 letters, digits, '.', '_' or '-' and not '.' or '..' "
            "(it is used in file names)",
            {"value": repr(value[:80])},
        )
    return value


def _not_boolean(value: Any) -> Any:
    if isinstance(value, bool):
        raise PydanticCustomError("boolean", "true/false is not allowed here", {})
    return value


SafeId = Annotated[
    str,
    BeforeValidator(_check_id),
    WithJsonSchema(
        {"type": "string", "pattern": _ID_PATTERN.pattern, "not": {"enum": sorted(_FORBIDDEN_IDS)}}
    ),
]


_SCORE_CHARS: dict[str, int | None] = {
    **{str(d): d for d in range(10)},
    NOT_VISUALISED: None,
    NOT_VISUALISED.upper(): None,
}
"""What :func:`_parse_scores` makes of an ASCII digit or x/X, by the rules it applies to any character."""


def _parse_scores(value: Any) -> Any:
    """Turn the character form into a mapping; check mapping keys are distinct segment numbers."""
    if isinstance(value, bool):
        raise PydanticCustomError("boolean_scores", "true/false is not a set of scores", {})
    if isinstance(value, int):
        value = str(value)  # YAML reads an unquoted all-digit score string as an integer
    if isinstance(value, str):
        text = value.replace(" ", "")
        scores: dict[int, int | None] = {}
        for position, char in enumerate(text, start=1):
            if char in _SCORE_CHARS:  # an ASCII digit, or x / X for not visualised
                scores[position] = _SCORE_CHARS[char]
            else:
                raise PydanticCustomError(
                    "score_character",
                    "character {position} is {char}; use a score digit or x for not visualised",
                    {"position": position, "char": repr(char)},
                )
        if not scores:
            raise PydanticCustomError("no_scores", "no scores given", {})
        return scores
    if isinstance(value, dict):
        seen: dict[int, Any] = {}
        for key, score in value.items():
            if isinstance(key, bool) or isinstance(score, bool):
                raise PydanticCustomError(
                    "boolean_score",
                    "{item} uses true/false, which is neither a segment number nor a score",
                    {"item": repr(f"{key}: {score}")},
                )
            number = _segment_key(key)
            if number in seen:
                raise PydanticCustomError(
                    "duplicate_segment", "segment {n} is scored twice", {"n": number}
                )
            seen[number] = (
                None
                if isinstance(score, str) and score.strip().lower() == NOT_VISUALISED
                else score
            )
        return seen
    return value


def _segment_key(key: Any) -> Any:
    if isinstance(key, str) and key.strip().isascii() and key.strip().isdecimal():
        return int(key.strip())
    return key


def _scores_input_schema(highest: int, meaning: str) -> WithJsonSchema:
    """The study-file schema of a score set: the character form or the mapping form."""
    score = {
        "anyOf": [
            {"type": "integer", "minimum": 1, "maximum": highest},
            {"type": "null"},
            {"const": "x"},
        ]
    }
    return WithJsonSchema(
        {
            "description": f"{meaning} One character per segment in number order (spaces ignored, x = not "
            "visualised), or a mapping of segment number to score (null or x = not visualised). "
            "Every segment of the model must be given.",
            "anyOf": [
                {"type": "string", "pattern": "^[0-9xX ]+$"},
                {"type": "integer", "minimum": 1},
                {
                    "type": "object",
                    "patternProperties": {"^[0-9]+$": score},
                    "additionalProperties": False,
                },
            ],
        },
        mode="validation",
    )


SegmentNumber = Annotated[int, Field(ge=1, le=18)]
WallMotionScore = Annotated[
    int,
    Field(
        ge=1,
        le=5,
        description="1 normal, 2 hypokinetic, 3 akinetic, 4 dyskinetic, 5 aneurysmal (5-point scale only)",
    ),
]
PerfusionScore = Annotated[
    int, Field(ge=1, le=3, description="1 normal, 2 reduced or delayed, 3 absent")
]
WallMotionScores = Annotated[
    dict[SegmentNumber, WallMotionScore | None],
    BeforeValidator(_parse_scores),
    _scores_input_schema(
        5,
        "Wall-motion scores: 1 normal, 2 hypokinetic, 3 akinetic, 4 dyskinetic, 5 aneurysmal (5-point scale only).",
    ),
]
PerfusionScores = Annotated[
    dict[SegmentNumber, PerfusionScore | None],
    BeforeValidator(_parse_scores),
    _scores_input_schema(
        3,
        "Perfusion scores: 1 normal, 2 reduced or delayed, 3 absent (Porter TR et al., JASE 2018; scale from memory).",
    ),
]


def _in_protocol_order(value: Any) -> Any:
    """Stages sorted into protocol order (a file may list them in any order, e.g. sorted keys)."""
    if not isinstance(value, dict):
        return value
    rank = {name: i for i, name in enumerate(_STAGE_VALUES)}
    return dict(sorted(value.items(), key=lambda item: rank.get(item[0], len(rank))))


class _Input(BaseModel):
    model_config = ConfigDict(
        extra="forbid", frozen=True, str_strip_whitespace=True, allow_inf_nan=False
    )


class StudyInfo(_Input):
    """Identification of the study."""

    id: SafeId = Field(
        description="Study id: 1–64 letters, digits, '.', '_' or '-'; used in output file names."
    )
    date: dt.date = Field(description="Date of the study (ISO 8601).")
    lab: str | None = Field(default=None, max_length=200, description="Name of the echo lab.")
    reader: str | None = Field(default=None, max_length=200, description="Reading physician.")
    sonographer: str | None = Field(
        default=None, max_length=200, description="Sonographer who acquired the study."
    )
    referring_physician: str | None = Field(
        default=None, max_length=200, description="Referring doctor."
    )
    report_status: ReportStatus = Field(
        default=ReportStatus.PRELIMINARY,
        description="preliminary until the reader signs; then final.",
    )


class Patient(_Input):
    """The patient; every field optional. Age comes from ``age_years`` or from ``birth_date``."""

    id: SafeId | None = Field(default=None, description="Patient or record number.")
    name: str | None = Field(default=None, max_length=200, description="Patient name.")
    birth_date: dt.date | None = Field(default=None, description="Date of birth (ISO 8601).")
    age_years: int | None = Field(
        default=None, ge=0, le=120, description="Age in whole years at the study."
    )
    sex: Sex | None = Field(default=None, description="Sex as recorded.")
    height_cm: float | None = Field(default=None, gt=30, lt=260, description="Height in cm.")
    weight_kg: float | None = Field(default=None, gt=1, lt=400, description="Weight in kg.")


class StageData(_Input):
    """What was measured and scored at one stage."""

    heart_rate_bpm: int | None = Field(
        default=None, ge=20, le=260, description="Heart rate in beats per minute."
    )
    systolic_bp_mmhg: int | None = Field(
        default=None, ge=40, le=300, description="Systolic blood pressure in mmHg."
    )
    diastolic_bp_mmhg: int | None = Field(
        default=None, ge=20, le=200, description="Diastolic blood pressure in mmHg."
    )
    dose_ug_kg_min: float | None = Field(
        default=None, ge=0, le=60, description="Dobutamine dose at this stage in μg/kg/min."
    )
    atropine_mg: float | None = Field(
        default=None, ge=0, le=3, description="Cumulative atropine given by this stage, in mg."
    )
    lvef_percent: float | None = Field(
        default=None, ge=5, le=95, description="Left-ventricular ejection fraction in %."
    )
    lv_esv_ml: float | None = Field(
        default=None, gt=0, le=1000, description="Left-ventricular end-systolic volume in mL."
    )
    wall_motion: WallMotionScores | None = Field(default=None)
    perfusion: PerfusionScores | None = Field(default=None)
    symptoms: str | None = Field(
        default=None,
        max_length=2000,
        description="Symptoms, ECG changes or events at this stage (free text).",
    )
    image_quality: ImageQuality | None = Field(
        default=None, description="Image quality at this stage: good, adequate or poor."
    )


class Exercise(_Input):
    """Exercise test results (treadmill or bicycle)."""

    duration_min: float = Field(
        ge=0, le=60, description="Exercise time in minutes (Bruce protocol for the Duke score)."
    )
    max_st_deviation_mm: float = Field(
        ge=0, le=20, description="Largest ST deviation other than in aVR, in mm."
    )
    angina_index: Literal[0, 1, 2] = Field(
        description="0 none, 1 non-limiting angina, 2 exercise-limiting angina."
    )
    mets: float | None = Field(
        default=None,
        gt=0,
        le=30,
        description="Estimated workload in METs (1 MET = 3.5 mL O2/kg/min).",
    )
    hr_recovery_1min_bpm: int | None = Field(
        default=None,
        ge=-50,
        le=150,
        description="Fall in heart rate during the first minute of recovery, in bpm.",
    )


class Contrast(_Input):
    """Ultrasound-enhancing agent and imaging settings."""

    agent: str | None = Field(
        default=None,
        max_length=200,
        description="Generic description of the agent, e.g. lipid-shelled perfluorocarbon microspheres.",
    )
    administration: Administration = Field(description="infusion or bolus.")
    imaging_mi: float | None = Field(
        default=None, gt=0, le=2, description="Mechanical index used for perfusion imaging."
    )
    flash_mi: float | None = Field(
        default=None, gt=0, le=2, description="Mechanical index of the high-MI flash."
    )


# --- Order identity (issue #16): what the hospital's order, archive and clinicians call this study.
# Limits are those of the fields the values travel in; a longer value is refused, never cut.
ACCESSION_NUMBER_MAX = 16
"""DICOM Accession Number is SH, at most 16 characters (PS3.5 table 6.2-1)."""
ORDER_NUMBER_MAX = 22
"""HL7 v2.5.1 ORC-2/ORC-3 (Placer/Filler Order Number, EI) length 22 [S, HL7 v2.5.1 ch. 4]."""
UID_MAX = 64
"""DICOM UI: at most 64 characters, digits in dot-separated components without leading zeros."""
PERSON_NAME_MAX = 64
"""DICOM PN: at most 64 characters per component group."""
CLINICIAN_ID_MAX = 16
"""DICOM SH (and HL7 XCN.1 fits it): the clinician's staff number."""
_UID_PATTERN = re.compile(r"^(0|[1-9][0-9]*)(\.(0|[1-9][0-9]*))*$")


def _limited(limit: int, field: str) -> Any:
    """A check that refuses text over ``limit`` characters or holding backslashes/control chars."""

    def check(value: str) -> str:
        if len(value) > limit:
            raise PydanticCustomError(
                "too_long",
                "{value} is {length} characters; {field} holds at most {limit} (refused, not cut)",
                {"value": repr(value[:80]), "length": len(value), "field": field, "limit": limit},
            )
        if "\\" in value or any(ord(c) < 32 for c in value):
            raise PydanticCustomError(
                "bad_character",
                "{value} holds a backslash or control character, which {field} does not allow",
                {"value": repr(value[:80]), "field": field},
            )
        return value

    return AfterValidator(check)


def _uid(value: str) -> str:
    if len(value) > UID_MAX or not _UID_PATTERN.fullmatch(value):
        raise PydanticCustomError(
            "uid",
            "{value} is not a DICOM UID (digits in dot-separated parts, no leading zeros, at most 64 characters)",
            {"value": repr(value[:80])},
        )
    return value


class Clinician(_Input):
    """A clinician named on the order: the performing or the interpreting one."""

    name: Annotated[str, _limited(PERSON_NAME_MAX, "a DICOM person name")] = Field(
        min_length=1, description="Name as printed, e.g. 'Dr Ada Quill' (at most 64 characters)."
    )
    id: Annotated[str, _limited(CLINICIAN_ID_MAX, "a DICOM SH staff identifier")] | None = Field(
        default=None,
        min_length=1,
        description="Staff number in the hospital (at most 16 characters).",
    )


class Order(_Input):
    """The order and imaging study this result belongs to, so it files beside the images."""

    accession_number: (
        Annotated[str, _limited(ACCESSION_NUMBER_MAX, "DICOM Accession Number (SH)")] | None
    ) = Field(default=None, min_length=1, description="Accession number (at most 16 characters).")
    placer_order_number: (
        Annotated[str, _limited(ORDER_NUMBER_MAX, "HL7 Placer Order Number (ORC-2)")] | None
    ) = Field(
        default=None, min_length=1, description="Requesting system's order number (at most 22)."
    )
    filler_order_number: (
        Annotated[str, _limited(ORDER_NUMBER_MAX, "HL7 Filler Order Number (ORC-3)")] | None
    ) = Field(default=None, min_length=1, description="Performing lab's order number (at most 22).")
    study_instance_uid: Annotated[str, AfterValidator(_uid)] | None = Field(
        default=None, description="Study Instance UID of the imaging study in the archive."
    )
    performing: Clinician | None = Field(
        default=None, description="Clinician who performed the study."
    )
    interpreting: Clinician | None = Field(
        default=None, description="Clinician who interpreted the study (else the reader)."
    )


class Study(_Input):
    """A stress-echo study: identification, protocol, and scores per stage."""

    model_config = ConfigDict(
        extra="forbid",
        frozen=True,
        str_strip_whitespace=True,
        allow_inf_nan=False,
        json_schema_extra={"$id": "urn:segreport:schemas:study-1.schema.json"},
    )

    schema_version: Annotated[Literal[1], BeforeValidator(_not_boolean)] = Field(
        description="Version of the study-file format."
    )
    study: StudyInfo = Field(description="Identification of the study.")
    patient: Patient = Field(default_factory=Patient, description="Patient details (all optional).")
    indication: str | None = Field(
        default=None, max_length=2000, description="Reason for the test (free text)."
    )
    protocol: Protocol = Field(description="Kind of stress.")
    segment_model: SegmentModel = Field(
        default=SegmentModel.SEVENTEEN, description="16, 17 or 18 segments."
    )
    wall_motion_scale: Literal[4, 5] = Field(
        default=4,
        description="4-point scale (Lang 2015) or the older 5-point scale with 5 = aneurysmal.",
    )
    territory_map: str | None = Field(
        default=None,
        max_length=500,
        description="standard, left_dominant, or a path to a lab map (YAML) relative to the study file.",
    )
    stages: Annotated[dict[Stage, StageData], BeforeValidator(_in_protocol_order)] = Field(
        min_length=1,
        description="Any of rest, low_dose, peak, recovery, in any order: the names fix the order.",
    )
    exercise: Exercise | None = Field(
        default=None, description="Exercise results (treadmill or bicycle studies)."
    )
    contrast: Contrast | None = Field(
        default=None, description="Enhancing agent and imaging settings, when one was used."
    )
    perfusion_curves: str | None = Field(
        default=None,
        max_length=500,
        description="Time-intensity curve CSV, relative to the study file.",
    )
    comments: str | None = Field(
        default=None,
        max_length=5000,
        description="Reader's free-text comments, printed in the report.",
    )
    # --- study data a lab records (issue 12) ---
    referral_question: str | None = Field(
        default=None,
        max_length=2000,
        description="The question the referring doctor asks of the test (free text).",
    )
    impression: str | None = Field(
        default=None,
        max_length=5000,
        description="The reader's own impression, in the reader's words (free text).",
    )
    recommendations: str | None = Field(
        default=None,
        max_length=5000,
        description="The reader's recommendations (free text).",
    )
    other_findings: str | None = Field(
        default=None,
        max_length=5000,
        description="Other echocardiographic findings, e.g. valves or pericardium (free text).",
    )
    computed_impression: str | None = Field(
        default=None,
        max_length=20000,
        description="The computed findings as the reader saw them when confirming the impression "
        "(written by the entry page; informative only: staleness is judged by the hash).",
    )
    impression_basis_sha256: str | None = Field(
        default=None,
        pattern=r"^[0-9a-f]{64}$",
        description="SHA-256 (lower-case hex) of the canonical computed findings the reader's "
        "impression was written against (reporting.impression.findings_sha256); when the scores "
        "change afterwards the impression is marked stale until the reader confirms it again.",
    )
    kept_notes: list[NoteKind] = Field(
        default_factory=list,
        description="Kinds of reader note (image-review prompts, entry-error warnings, protocol and "
        "fit-quality remarks) the reader keeps in the referring-doctor PDF; the others stay in the "
        "record and on the entry page only.",
    )
    procedure: Procedure | None = Field(
        default=None,
        description="How the test was run: baseline rhythm and ECG, medications, why it stopped, "
        "complications and arrhythmias.",
    )
    vasodilator: Vasodilator | None = Field(
        default=None, description="Vasodilator agent and dose (vasodilator studies only)."
    )
    order: Order | None = Field(
        default=None,
        description="Order and imaging-study identity: accession and order numbers, Study Instance UID, clinicians.",
    )

    @model_validator(mode="after")
    def _whole_study(self) -> Self:
        stages = {
            stage.value: {
                kind: scores
                for kind in ("wall_motion", "perfusion")
                if (scores := getattr(data, kind)) is not None
            }
            for stage, data in self.stages.items()
        }
        problems = _study_problems(
            int(self.segment_model),
            self.wall_motion_scale,
            stages,
            self.patient.birth_date,
            self.study.date,
            self.patient.age_years,
        )
        if problems:
            raise ValidationError.from_exception_data("Study", problems)
        return self

    @model_validator(mode="after")
    def _vasodilator_only_for_vasodilator_stress(self) -> Self:
        if self.vasodilator is not None and self.protocol is not Protocol.VASODILATOR:
            raise ValidationError.from_exception_data(
                "Study",
                [
                    _problem(
                        ("vasodilator",),
                        f"a vasodilator agent is recorded but the protocol is "
                        f"{self.protocol.value}; use protocol: vasodilator or remove it",
                        self.vasodilator.agent.value,
                    )
                ],
            )
        return self

    @model_validator(mode="wrap")
    @classmethod
    def _every_problem(cls, data: Any, handler: ModelWrapValidatorHandler[Self]) -> Self:
        # Field errors stop pydantic before the whole-study checks run; run those checks on the
        # raw data as well, so a reader sees every problem in one pass. Defined after the "after"
        # validators so that it wraps them too (pydantic applies model validators in order).
        try:
            return handler(data)
        except ValidationError as exc:
            if not isinstance(data, dict):
                raise
            errors = exc.errors()
            known = [tuple(e["loc"]) for e in errors]
            extra = [
                p
                for p in _raw_study_problems(data)
                if not any(tuple(p["loc"][: len(k)]) == k for k in known)
            ]
            if not extra and not any(e["type"] == SCORE_COUNT for e in errors):
                raise
            raise ValidationError.from_exception_data(
                "Study", [*(_hinted(e, data) for e in errors), *extra]
            ) from None

    def age_years(self) -> int | None:
        """Age at the study: ``patient.age_years``, else from the birth date and the study date."""
        if self.patient.age_years is not None:
            return self.patient.age_years
        born = self.patient.birth_date
        return None if born is None else _age_on(born, self.study.date)


def _age_on(born: dt.date, on: dt.date) -> int:
    return on.year - born.year - ((on.month, on.day) < (born.month, born.day))


_EVERY_SEGMENT = {int(m): frozenset(range(1, int(m) + 1)) for m in SegmentModel}


def _study_problems(
    count: int | None,
    scale: int,
    stages: Mapping[str, Mapping[str, Mapping[int, Any]]],
    born: dt.date | None,
    on: dt.date | None,
    age_years: int | None,
) -> list[InitErrorDetails]:
    """Checks that need the whole study: scores against the model, age."""
    problems: list[InitErrorDetails] = []
    for stage, by_kind in stages.items():
        for kind, scores in by_kind.items():
            where = ("stages", stage, kind)
            if count is None:
                continue
            if scores.keys() == _EVERY_SEGMENT.get(count, frozenset()) and (
                kind != "wall_motion" or scale != 4 or 5 not in scores.values()
            ):
                continue  # the usual case, checked at C speed: one score per segment, none amiss
            for n in sorted(n for n in scores if n > count):
                problems.append(
                    _problem(
                        (*where, n),
                        f"segment {n} does not exist in the {count}-segment model",
                        scores[n],
                    )
                )
            missing = [n for n in range(1, count + 1) if n not in scores]
            if missing:
                problems.append(
                    _too_few(
                        where,
                        len(scores),
                        count,
                        f" (none for segment {number_ranges(missing)}; use x for not visualised)",
                    )
                )
            if kind == "wall_motion" and scale == 4:
                for n, score in scores.items():
                    if score == 5 and n <= count:
                        problems.append(
                            _problem(
                                (*where, n),
                                "score 5 (aneurysmal) needs wall_motion_scale: 5",
                                score,
                            )
                        )
    if born is not None and on is not None:
        age = _age_on(born, on)
        if born > on:
            problems.append(
                _problem(("patient", "birth_date"), "birth date is after the study date", str(born))
            )
        elif age > MAX_AGE_YEARS:
            problems.append(
                _problem(
                    ("patient", "birth_date"),
                    f"gives an age of {age} years at the study date",
                    str(born),
                )
            )
        elif age_years is not None and abs(age - age_years) > 1:
            problems.append(
                _problem(
                    ("patient", "age_years"),
                    f"{age_years} disagrees with the birth date (age {age} at the study date)",
                    age_years,
                )
            )
    return problems


def _raw_study_problems(data: dict[Any, Any]) -> list[InitErrorDetails]:
    """:func:`_study_problems` on unvalidated data, using whatever parts of it can be read."""
    count = _segment_count(data.get("segment_model", int(SegmentModel.SEVENTEEN)))
    scale = 5 if data.get("wall_motion_scale") == 5 else 4
    stages: dict[str, dict[str, dict[int, Any]]] = {}
    raw_stages = data.get("stages")
    for name, stage in raw_stages.items() if isinstance(raw_stages, dict) else ():
        if name not in _STAGE_VALUES or not isinstance(stage, dict):
            continue
        stages[name] = {}
        for kind in ("wall_motion", "perfusion"):
            try:
                scores = _parse_scores(stage.get(kind))
            except (PydanticCustomError, ValueError):
                continue
            if isinstance(scores, dict) and all(isinstance(k, int) for k in scores):
                stages[name][kind] = scores
    study, patient = data.get("study"), data.get("patient")
    on = _date_or_none(study.get("date") if isinstance(study, dict) else None)
    born = _date_or_none(patient.get("birth_date") if isinstance(patient, dict) else None)
    age = patient.get("age_years") if isinstance(patient, dict) else None
    return _study_problems(
        count,
        scale,
        stages,
        born,
        on,
        age if isinstance(age, int) and not isinstance(age, bool) else None,
    )


def _segment_count(value: Any) -> int | None:
    """The segment model as pydantic would read it (17, 17.0 or "17"), else ``None``."""
    if isinstance(value, bool):
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return int(number) if number in (16, 17, 18) else None


def _date_or_none(value: Any) -> dt.date | None:
    if isinstance(value, dt.datetime):
        return value.date()
    if isinstance(value, dt.date):
        return value
    try:
        return dt.date.fromisoformat(value) if isinstance(value, str) else None
    except ValueError:
        return None


def _again(error: ErrorDetails) -> InitErrorDetails:
    """An error pydantic reported, in the form that can be raised again unchanged."""
    message = error["msg"]  # pydantic substitutes only {context keys}, so braces pass through
    return InitErrorDetails(
        type=PydanticCustomError(error["type"], message, error.get("ctx")),
        loc=error["loc"],
        input=error["input"],
    )


def _problem(
    loc: tuple[str | int, ...], message: str, value: Any, *, kind: str = "study"
) -> InitErrorDetails:
    return InitErrorDetails(
        type=PydanticCustomError(kind, "{message}", {"message": message}), loc=loc, input=value
    )


SCORE_COUNT = "score_count"
"""Error type of a score set with too few scores for the segment model."""


def _ring_groups(count: int) -> list[tuple[Ring, list[int]]]:
    """The rings of the ``count``-segment model with their segment numbers, basal first."""
    rings: dict[Ring, list[int]] = {}
    for seg in segments_of(count):
        rings.setdefault(seg.ring, []).append(seg.number)
    return list(rings.items())


def _group_hint(raw: Any, count: int) -> str | None:
    """Which ring group of a score string written ring by ring (``111111 111111 1111 1``) holds
    the wrong number of scores, when exactly one does; ``None`` otherwise."""
    if not isinstance(raw, str):
        return None
    groups = raw.split()
    rings = _ring_groups(count)
    if len(groups) != len(rings):
        return None
    wrong = [
        (group, ring, numbers)
        for group, (ring, numbers) in zip(groups, rings, strict=True)
        if len(group) != len(numbers)
    ]
    if len(wrong) != 1:
        return None
    group, ring, numbers = wrong[0]
    return (
        f"the {ring.value} group {group!r} has {len(group)} scores, not {len(numbers)} "
        f"(segments {number_ranges(numbers)})"
    )


def _hinted(error: ErrorDetails, data: dict[Any, Any]) -> InitErrorDetails:
    """``error`` again, naming the ring group at fault when a score count is wrong and the
    reader grouped the scores by ring: a slip in the first group is not "none for segment 17"."""
    loc = error["loc"]
    if error["type"] == SCORE_COUNT and len(loc) == 3:
        stages = data.get("stages")
        stage = stages.get(loc[1]) if isinstance(stages, dict) else None
        count = _segment_count(data.get("segment_model", int(SegmentModel.SEVENTEEN)))
        raw = stage.get(loc[2]) if isinstance(stage, dict) else None
        hint = _group_hint(raw, count) if count is not None else None
        if hint is not None and count is not None:
            return _too_few(loc, error["input"], count, f": {hint}; use x for not visualised")
    return _again(error)


def _too_few(loc: tuple[str | int, ...], given: int, count: int, why: str) -> InitErrorDetails:
    """Too few scores for the ``count``-segment model; ``why`` follows (which segments have
    none, or which ring group is short)."""
    return _problem(
        loc,
        f"{given} scores given; the {count}-segment model needs {count}{why}",
        given,
        kind=SCORE_COUNT,
    )
