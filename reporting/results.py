"""Result models: the typed :class:`Analysis` that every renderer and exporter reads.

An Analysis is frozen and complete: it carries everything a report needs (study header, patient,
haemodynamics, per-segment and per-territory results, conclusions, notes), so renderers never go
back to the study file. Its JSON form *is* the analysis record (``schemas/record.schema.json``);
the keys fixed by the interface contract are all here.
"""

import datetime as dt
from collections.abc import Mapping
from functools import cached_property
from typing import Any, Literal, Self, cast

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    ValidatorFunctionWrapHandler,
    computed_field,
    model_validator,
)

from reporting.comparison import Comparison
from reporting.kinetics.models import KineticsResult
from reporting.model import Order, Protocol, ReportStatus, Sex, Stage, Study
from reporting.notes import NoteKind as NoteKind
from reporting.procedure import (
    Arrhythmia,
    BaselineEcg,
    BaselineRhythm,
    Complication,
    ImageQuality,
    MedicationUse,
    StopReason,
    VasodilatorAgent,
)
from reporting.scoring import IschemiaExtent, PerfusionResponse, WallMotionResponse
from reporting.segments import Ring, SegmentModel, Territory
from reporting.settings import HeartRateFormula
from reporting.stress import DukeRisk
from reporting.vocabulary import Vocabulary

RECORD_SCHEMA_VERSION = 1
RECORD_SCHEMA_ID = f"urn:segreport:schemas:record-{RECORD_SCHEMA_VERSION}.schema.json"


class _Result(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


def _no_default(schema: dict[str, Any]) -> None:
    schema.pop("default", None)


class StudyHeader(_Result):
    """Identification of the study, as entered (or de-identified: see ``deidentified``)."""

    id: str = Field(description="Study id (a keyed hash in a de-identified record).")
    date: dt.date | None = Field(
        description="Date of the study; null in a de-identified record, which keeps the year only."
    )
    year: int = Field(
        default=0,  # filled from the date by _year_from_date; 0 never survives validation
        description="Year of the study (always given; the only part of the date kept when de-identified).",
        json_schema_extra=_no_default,
    )
    lab: str | None = Field(description="Echo lab (the study's, else the lab settings').")
    lab_address: str | None = Field(
        description="Lab address or contact line from the lab settings."
    )
    lab_logo: str | None = Field(
        default=None,
        description="Path of the lab's logo image (PNG or SVG) from the lab settings, printed in "
        "the PDF letterhead.",
    )
    reader: str | None = Field(description="Reading physician.")
    sonographer: str | None = Field(description="Sonographer.")
    referring_physician: str | None = Field(description="Referring doctor.")
    report_status: ReportStatus = Field(description="preliminary or final.")
    indication: str | None = Field(description="Reason for the test.")
    comments: str | None = Field(description="Reader's comments.")
    referral_question: str | None = Field(
        default=None, description="The referring doctor's question (free text)."
    )
    impression: str | None = Field(
        default=None, description="The reader's own impression (free text)."
    )
    recommendations: str | None = Field(
        default=None, description="The reader's recommendations (free text)."
    )
    other_findings: str | None = Field(
        default=None, description="Other echocardiographic findings (free text)."
    )
    computed_impression: str | None = Field(
        default=None,
        description="The computed findings the reader confirmed the impression against, as the "
        "study file keeps them.",
    )
    impression_basis_sha256: str | None = Field(
        default=None,
        description="SHA-256 of the canonical computed findings the reader's impression was "
        "written against (from the study file); see findings_sha256.",
    )
    kept_notes: list[NoteKind] = Field(
        default_factory=list,
        description="Kinds of reader note the reader keeps in the referring-doctor PDF.",
    )
    deidentified: bool = Field(
        default=False,
        description="True when names, record numbers, dates finer than the year, ages over 89 and "
        "(unless kept) free text were removed and the ids replaced by keyed hashes "
        "(HIPAA Safe Harbor, 45 CFR 164.514(b)(2)).",
    )

    @model_validator(mode="before")
    @classmethod
    def _year_from_date(cls, data: Any) -> Any:
        # The year follows from the date unless de-identification removed the date.
        if isinstance(data, dict) and not data.get("year") and data.get("date") is not None:
            date = data["date"]
            text = date.isoformat() if isinstance(date, dt.date) else str(date)
            if text[:4].isdigit():
                data = {**data, "year": int(text[:4])}
        return data

    @model_validator(mode="after")
    def _year_fits_date(self) -> Self:
        if self.year <= 0:
            raise ValueError("year is required when the date is null")
        if self.date is not None and self.date.year != self.year:
            raise ValueError(f"year {self.year} does not match the date {self.date.isoformat()}")
        return self


class PatientSummary(_Result):
    """Patient details carried into the report."""

    id: str | None = Field(
        description="Patient or record number (a keyed hash in a de-identified record)."
    )
    name: str | None = Field(description="Patient name.")
    birth_date: dt.date | None = Field(description="Date of birth.")
    age_years: int | None = Field(
        description="Age at the study in whole years (given or derived from the birth date); "
        "null when withheld as 90 or over."
    )
    age_group: Literal["90+"] | None = Field(
        default=None,
        description="'90+' when the age is 90 or over and withheld from a de-identified record "
        "(45 CFR 164.514(b)(2)(i)(C)); age_years is then null.",
    )
    sex: Sex | None = Field(description="Sex as recorded.")


class TerritoryMapInfo(_Result):
    """Which territory map the analysis used."""

    name: str = Field(description="Map name.")
    title: str = Field(description="Human-readable title.")
    source: str = Field(description="Published source or 'lab-defined'.")


class StageHaemodynamics(_Result):
    """Haemodynamics and LV function at one stage."""

    heart_rate_bpm: int | None = Field(description="Heart rate (bpm).")
    systolic_bp_mmhg: int | None = Field(description="Systolic pressure (mmHg).")
    diastolic_bp_mmhg: int | None = Field(description="Diastolic pressure (mmHg).")
    rate_pressure_product: int | None = Field(
        description="Heart rate × systolic pressure (bpm·mmHg)."
    )
    hr_percent_of_predicted: float | None = Field(
        description="Heart rate as % of the age-predicted maximum."
    )
    dose_ug_kg_min: float | None = Field(description="Dobutamine dose (μg/kg/min).")
    atropine_mg: float | None = Field(description="Cumulative atropine (mg).")
    lvef_percent: float | None = Field(description="LV ejection fraction (%).")
    lv_esv_ml: float | None = Field(description="LV end-systolic volume (mL).")
    symptoms: str | None = Field(description="Symptoms and events (free text).")


class SegmentResult(_Result):
    """One segment's scores and responses."""

    number: int = Field(description="Segment number.")
    name: str = Field(description="Segment name (Cerqueira 2002).")
    ring: Ring = Field(description="basal, mid, apical or apex.")
    territory: Territory = Field(description="Territory under the map used.")
    shared_supply: list[Territory] = Field(
        description="Other territories that commonly supply this segment."
    )
    wall_motion: dict[Stage, int | None] = Field(
        description="Wall-motion score per stage; null = not visualised."
    )
    perfusion: dict[Stage, int | None] = Field(
        description="Perfusion score per stage; null = not visualised."
    )
    response: WallMotionResponse = Field(description="Wall-motion response to stress.")
    baseline_stage: Stage | None = Field(
        default=None,
        description="Stage the response is judged from: rest, else low dose when rest did not see "
        "the segment; null when neither saw it.",
    )
    ischemia_onset_stage: Stage | None = Field(
        default=None,
        description="First stage at which a new or worsening abnormality was seen (ischemic or "
        "biphasic segments; recovery when it was seen only after stress); null otherwise.",
    )
    perfusion_response: PerfusionResponse = Field(
        description="Perfusion response from rest to peak."
    )


class TerritoryStatus(Vocabulary):
    """Answer of one territory."""

    ISCHEMIA = "ischemia"
    """Ischaemia by wall motion or reversible perfusion defect."""
    NO_ISCHEMIA = "no_ischemia"
    """No ischaemia in the segments of the territory that were seen at baseline and at stress."""
    NON_DIAGNOSTIC = "non_diagnostic"
    """No segment of the territory was seen at both baseline and stress."""


class TerritoryResult(_Result):
    """Results for one coronary territory."""

    segments: list[int] = Field(description="Segments in the territory.")
    ischemic_segments: list[int] = Field(
        description="Segments whose wall-motion response is ischemic or biphasic."
    )
    ischemic_perfusion_segments: list[int] = Field(
        default_factory=list,
        description="Segments ischaemic by perfusion only (reversible defect, wall motion not "
        "ischemic); shown beside ischemic_segments.",
    )
    viable_segments: list[int] = Field(
        description="Abnormal at rest and improving at low dose or stress."
    )
    fixed_segments: list[int] = Field(description="Abnormal at rest and unchanged.")
    wmsi: dict[Stage, float | None] = Field(
        description="Mean wall-motion score of the territory's scored segments per stage."
    )
    scored_segments: dict[Stage, int] = Field(description="Segments scored per stage.")
    reversible_perfusion_segments: list[int] = Field(
        description="Reversible perfusion defects (normal at rest, abnormal at peak)."
    )
    partially_reversible_perfusion_segments: list[int] = Field(
        default_factory=list,
        description="Defects present at rest that worsen at peak (flagged for review).",
    )
    fixed_perfusion_segments: list[int] = Field(description="Fixed perfusion defects.")
    ischemic: bool = Field(description="Ischaemia by wall motion or reversible perfusion defect.")
    status: TerritoryStatus = Field(
        default=TerritoryStatus.NO_ISCHEMIA,
        description="ischemia, no_ischemia, or non_diagnostic when no segment of the territory was "
        "seen at baseline and at stress.",
    )


class PerfusionResult(_Result):
    """Contrast perfusion summary."""

    scored: bool = Field(description="Perfusion was scored at any stage.")
    defect_extent_percent: dict[Stage, float] = Field(
        description="Segments scored ≥ 2 ÷ segments scored × 100, per stage."
    )
    score_index: dict[Stage, float] = Field(description="Mean perfusion score per stage.")
    scored_segments: dict[Stage, int] = Field(description="Segments scored per stage.")
    reversible_segments: list[int] = Field(description="Normal at rest, abnormal at peak.")
    partially_reversible_segments: list[int] = Field(
        description="Abnormal at rest and worse at peak."
    )
    fixed_segments: list[int] = Field(description="Abnormal at rest and unchanged at peak.")


class StressResult(_Result):
    """Adequacy of stress and exercise indices."""

    age_years: int | None = Field(description="Age used for the targets.")
    heart_rate_formula: HeartRateFormula = Field(
        description="Formula of the age-predicted maximum."
    )
    age_predicted_max_hr_bpm: float | None = Field(
        description="Age-predicted maximum heart rate (bpm)."
    )
    target_hr_bpm: float | None = Field(
        description="Target heart rate (bpm), a fraction of the predicted maximum."
    )
    target_fraction: float = Field(description="The fraction used (0.85 by default).")
    peak_hr_bpm: int | None = Field(description="Highest heart rate at a stress stage (bpm).")
    peak_hr_percent_of_predicted: float | None = Field(
        description="Peak heart rate as % of the predicted maximum."
    )
    heart_rate_target_applies: bool = Field(
        description="False for vasodilator stress, where heart rate is not the end point."
    )
    adequate: bool = Field(
        description="Target heart rate reached (or not rate-dependent stress with a peak stage)."
    )
    adequacy_note: str = Field(description="Why stress was or was not judged adequate.")
    rate_pressure_product: dict[Stage, int] = Field(
        description="Heart rate × systolic pressure per stage."
    )
    duke_treadmill_score: float | None = Field(
        description="Duke treadmill score (Mark 1991); null when not computed."
    )
    duke_risk: DukeRisk | None = Field(
        description="low, intermediate or high; null when not an exercise study."
    )
    mets: float | None = Field(description="Estimated workload (METs).")
    exercise_duration_min: float | None = Field(
        default=None, description="Exercise time in minutes (treadmill or bicycle)."
    )
    max_st_deviation_mm: float | None = Field(
        default=None, description="Largest ST deviation during exercise (mm)."
    )
    angina_index: int | None = Field(
        default=None, description="0 none, 1 non-limiting, 2 exercise-limiting angina."
    )
    hr_recovery_1min_bpm: int | None = Field(
        default=None, description="Fall in heart rate in the first minute of recovery (bpm)."
    )
    hr_recovery_abnormal: bool | None = Field(
        default=None,
        description="Heart-rate recovery at or below the abnormal cut-off; null when not measured.",
    )
    hr_recovery_abnormal_max_bpm: float | None = Field(
        default=None,
        description="The cut-off used (bpm in the first minute; ≤ 18 in stress echo, Watanabe 2001); "
        "null when not measured.",
    )
    hr_recovery_source: str | None = Field(
        default=None, description="Source of the cut-off (or the lab's own setting)."
    )


class FindingCode(Vocabulary):
    """Findings that grade risk (noninvasive risk tables); the first group are high-risk findings."""

    LOW_THRESHOLD_ISCHEMIA = "low_threshold_ischemia"
    """More than two segments newly abnormal at low dobutamine dose or at low heart rate."""
    EXTENSIVE_ISCHEMIA = "extensive_ischemia"
    """Ischaemia in three or more segments."""
    MULTIVESSEL_ISCHEMIA = "multivessel_ischemia"
    """Ischaemia in two or more coronary territories."""
    LOW_RESTING_EF = "low_resting_ef"
    """Resting LVEF below 35 %."""
    HIGH_PEAK_WMSI = "high_peak_wmsi"
    """Peak WMSI above 1.7."""
    LV_DILATION = "lv_dilation"
    """LV end-systolic volume rises with stress above the lab's threshold (cavity dilation)."""
    EF_FALL = "ef_fall"
    """LVEF falls by 10 points or more with stress, or peak exercise LVEF below 45 %."""
    DUKE_HIGH_RISK = "duke_high_risk"
    """Duke treadmill score in the high-risk band."""
    HYPOTENSIVE_RESPONSE = "hypotensive_response"
    """Exercise: peak systolic pressure below rest, or a fall of more than 10 mmHg from the highest
    exercise pressure."""
    LARGE_PERFUSION_DEFECT = "large_perfusion_defect"
    """Reversible perfusion defects in 10 % of the myocardium or more."""
    REDUCED_RESTING_EF = "reduced_resting_ef"
    """Intermediate risk: resting LVEF 35–49 %."""
    LIMITED_ISCHEMIA = "limited_ischemia"
    """Intermediate risk: inducible ischaemia in one or two segments of one coronary bed."""
    MODERATE_PERFUSION_DEFECT = "moderate_perfusion_defect"
    """Intermediate risk: reversible perfusion defects in 5 to < 10 % of the myocardium."""
    DUKE_INTERMEDIATE_RISK = "duke_intermediate_risk"
    """Intermediate risk: Duke treadmill score −10 to +4."""
    DUKE_LOW_RISK = "duke_low_risk"
    """Low risk: Duke treadmill score +5 or more."""
    NO_INDUCIBLE_ISCHEMIA = "no_inducible_ischemia"
    """Low risk: normal stress wall motion and perfusion, or no change of resting abnormalities."""


class RiskLevel(Vocabulary):
    """Annual risk band of the noninvasive risk tables (Fihn SD et al., Circulation 2012)."""

    LOW = "low"
    """Below 1 % per year (death or MI)."""
    INTERMEDIATE = "intermediate"
    """1–3 % per year."""
    HIGH = "high"
    """Above 3 % per year."""
    NOT_GRADED = "not_graded"
    """Non-diagnostic study with no criterion met."""


class RiskCriterion(_Result):
    """One criterion that set the risk band, with its evidence and source."""

    code: FindingCode = Field(description="Kind of finding.")
    level: RiskLevel = Field(
        description="Band the criterion belongs to: low, intermediate or high."
    )
    detail: str = Field(description="What was found, with the numbers.")
    source: str = Field(description="Published source of the criterion.")


class HighRiskFinding(_Result):
    """A high-risk finding, its evidence and its source."""

    code: FindingCode = Field(description="Kind of finding.")
    detail: str = Field(description="What was found, with the numbers.")
    source: str = Field(description="Published source of the criterion.")


class DiagnosticStatus(Vocabulary):
    """Overall answer of the study for inducible ischaemia."""

    ISCHEMIA = "ischemia"
    """Inducible ischaemia shown."""
    NO_ISCHEMIA = "no_ischemia"
    """No inducible ischaemia at adequate stress."""
    NON_DIAGNOSTIC = "non_diagnostic"
    """No ischaemia shown, but there were no stress images, a territory was not assessable or
    stress was inadequate."""


class NonDiagnosticReason(Vocabulary):
    """Why a study without ischaemia is non-diagnostic (checked in this order)."""

    NO_STRESS_IMAGES = "no_stress_images"
    """No stress stage (low dose, peak or recovery) was imaged."""
    TERRITORY_NOT_ASSESSABLE = "territory_not_assessable"
    """At least one territory had no segment seen at baseline and at stress."""
    STRESS_INADEQUATE = "stress_inadequate"
    """The heart-rate target was not reached or not established (not for vasodilator stress)."""


class ImpressionStatus(Vocabulary):
    """Whether the reader's impression was written against the findings computed now."""

    NONE = "none"
    """The reader wrote no impression or recommendation: the computed findings are a draft."""
    CURRENT = "current"
    """The impression was confirmed against the findings computed now."""
    STALE = "stale"
    """The impression was confirmed against earlier findings; the scores changed since."""
    UNCONFIRMED = "unconfirmed"
    """The reader wrote an impression, but the study keeps no basis hash (not yet confirmed)."""


class Note(_Result):
    """An image-quality, protocol or interpretation note for the reader."""

    kind: NoteKind = Field(description="Kind of note.")
    text: str = Field(description="The note.")
    source: str | None = Field(description="Published source, when the note rests on one.")


class Conclusion(_Result):
    """The answer of the study."""

    ischemia: bool = Field(
        description="Any segment ischemic or biphasic by wall motion, or a reversible perfusion defect."
    )
    status: DiagnosticStatus = Field(description="ischemia, no_ischemia or non_diagnostic.")
    non_diagnostic_reason: NonDiagnosticReason | None = Field(
        default=None, description="Why the study is non-diagnostic; null otherwise."
    )
    ischemic_segments: list[int] = Field(
        default_factory=list,
        description="Segments ischaemic by wall motion (ischemic or biphasic) or by a reversible "
        "perfusion defect.",
    )
    ischemic_territories: list[Territory] = Field(
        description="Territories of the ischaemic segments."
    )
    ischemic_segment_count: int = Field(description="Segments ischemic or biphasic by wall motion.")
    ischemia_extent: IschemiaExtent = Field(
        description="none, mild (1–2) or moderate_severe (≥ 3) (Kataoka 2015), counting the "
        "segments ischaemic by wall motion or perfusion."
    )
    multivessel: bool = Field(
        description="Ischaemia in two or more territories, an RCA or LCx apical segment counting "
        "only when its territory also has basal or mid ischaemia or the LAD has none."
    )
    wrap_around_segments: list[int] = Field(
        default_factory=list,
        description="RCA or LCx apical segments whose ischaemia is reported as LAD, possibly "
        "wrapping around the apex (not counted toward multivessel).",
    )
    viable_segments: list[int] = Field(
        description="Segments biphasic or with sustained improvement."
    )
    fixed_segments: list[int] = Field(description="Segments abnormal at rest and unchanged.")
    akinetic_to_dyskinetic_segments: list[int] = Field(
        description="Akinesis turning dyskinetic (not ischaemia)."
    )
    high_risk_findings: list[HighRiskFinding] = Field(
        description="High-risk findings with sources."
    )
    risk: RiskLevel = Field(
        default=RiskLevel.NOT_GRADED,
        description="low, intermediate, high or not_graded (noninvasive risk tables).",
    )
    risk_criteria: list[RiskCriterion] = Field(
        default_factory=list, description="The criteria that set the risk band."
    )


# --- study data a lab records (issue 12) ----------------------------------------------------------


class MedicationSummary(_Result):
    """Medications that change the response to stress, as recorded."""

    beta_blocker: MedicationUse | None = Field(description="not_prescribed, taken or withheld.")
    rate_limiting_calcium_channel_blocker: MedicationUse | None = Field(
        description="not_prescribed, taken or withheld."
    )
    nitrate: MedicationUse | None = Field(description="not_prescribed, taken or withheld.")


class VasodilatorSummary(_Result):
    """Vasodilator agent and dose; exactly one dose field can be set, in the agent's unit."""

    agent: VasodilatorAgent = Field(description="Generic name of the agent.")
    dose_ug_kg_min: float | None = Field(description="Infusion rate in μg/kg/min (adenosine).")
    dose_mg: float | None = Field(description="Bolus dose in mg (regadenoson).")
    dose_mg_kg: float | None = Field(description="Total dose in mg/kg (dipyridamole).")


class ProcedureSummary(_Result):
    """How the test was run, as categories only (no free text): kept in de-identified records."""

    baseline_rhythm: BaselineRhythm | None = Field(
        default=None, description="Rhythm on the resting ECG; null when not recorded."
    )
    baseline_ecg: list[BaselineEcg] = Field(
        default_factory=list, description="Findings on the resting ECG; empty when not recorded."
    )
    medications: MedicationSummary | None = Field(
        default=None, description="Medications relevant to the test; null when not recorded."
    )
    stop_reasons: list[StopReason] = Field(
        default_factory=list, description="Why stress was stopped; empty when not recorded."
    )
    complications: list[Complication] = Field(
        default_factory=list,
        description="Complications other than arrhythmias ('none' when none); empty when not recorded.",
    )
    arrhythmias: list[Arrhythmia] = Field(
        default_factory=list,
        description="Arrhythmias during stress or recovery ('none' when none); empty when not recorded.",
    )
    vasodilator: VasodilatorSummary | None = Field(
        default=None, description="Vasodilator agent and dose; null unless a vasodilator study."
    )
    image_quality: dict[Stage, ImageQuality] = Field(
        default_factory=dict, description="Image quality per stage where the reader recorded it."
    )

    @classmethod
    def from_study(cls, study: Study) -> Self:
        """The record form of the study's ``procedure``, ``vasodilator`` and stage image quality."""
        p, v = study.procedure, study.vasodilator
        return cls(
            baseline_rhythm=p.baseline_rhythm if p else None,
            baseline_ecg=list(p.baseline_ecg or []) if p else [],
            medications=MedicationSummary.model_validate(p.medications.model_dump())
            if p is not None and p.medications is not None
            else None,
            stop_reasons=list(p.stop_reasons or []) if p else [],
            complications=list(p.complications or []) if p else [],
            arrhythmias=list(p.arrhythmias or []) if p else [],
            vasodilator=VasodilatorSummary.model_validate(v.model_dump()) if v else None,
            image_quality={s: d.image_quality for s, d in study.stages.items() if d.image_quality},
        )


class Analysis(_Result):
    """Everything computed from one study: the analysis record."""

    model_config = ConfigDict(
        extra="forbid",
        frozen=True,
        json_schema_extra={"$id": RECORD_SCHEMA_ID},
    )

    schema_version: int = Field(description="Version of the record format.")
    generator: str = Field(description="Program and version that computed the record.")
    study: StudyHeader = Field(description="Study identification.")
    patient: PatientSummary = Field(description="Patient details.")
    protocol: Protocol = Field(description="Kind of stress.")
    segment_model: SegmentModel = Field(description="16, 17 or 18 segments.")
    wall_motion_scale: int = Field(description="Highest wall-motion score of the scale (4 or 5).")
    territory_map: TerritoryMapInfo = Field(description="Territory map used.")
    stages: list[Stage] = Field(description="Stages present, in protocol order.")
    haemodynamics: dict[Stage, StageHaemodynamics] = Field(description="Haemodynamics per stage.")
    contrast_used: bool = Field(description="An ultrasound-enhancing agent was used.")
    contrast_agent: str | None = Field(description="Generic description of the agent.")
    wmsi: dict[Stage, float] = Field(
        description="Wall-motion score index per stage with scored segments (full precision)."
    )
    wmsi_scored_segments: dict[Stage, int] = Field(
        description="Segments that entered the WMSI at each stage."
    )
    segments: list[SegmentResult] = Field(description="Per-segment results in segment order.")
    territories: dict[Territory, TerritoryResult] = Field(description="Per-territory results.")
    perfusion: PerfusionResult = Field(description="Contrast perfusion summary.")
    kinetics: KineticsResult | None = Field(
        default=None,
        description="Replenishment kinetics from the study's time-intensity curves; null without curves.",
    )
    stress: StressResult = Field(description="Stress adequacy and exercise indices.")
    procedure: ProcedureSummary = Field(
        default_factory=ProcedureSummary,
        description="How the test was run: baseline ECG, medications, stopping, complications, "
        "vasodilator agent, image quality.",
    )
    conclusion: Conclusion = Field(description="Conclusions and high-risk findings.")
    impression_status: ImpressionStatus = Field(
        default=ImpressionStatus.NONE,
        description="none, current, stale (written against earlier findings) or unconfirmed.",
    )
    notes: list[Note] = Field(description="Image-quality, protocol and interpretation notes.")
    cautions: list[str] = Field(description="Cautions that accompany every report.")
    order: Order | None = Field(
        default=None,
        description="Order and imaging-study identity (accession, order numbers, Study Instance UID, clinicians); null when not given or de-identified.",
    )
    comparison: Comparison | None = Field(
        default=None,
        description="This study compared with the patient's latest earlier signed study (prior "
        "study id and date, WMSI per stage then and now, change per territory, changed segments); "
        "null when no prior study is known.",
    )

    # Derived from the fields above, made on first use and kept (a cached property keeps its value
    # in the instance's __dict__, which a frozen model still has): an analysis used for tables, QA
    # or agreement never words its findings. A record read back keeps the values it was written
    # with (see _stored_derived), so a signed record is never reworded by a later version.

    @computed_field(  # type: ignore[prop-decorator]
        description="The computed findings as text (headline and impression by territory): the "
        "draft the reader accepts, edits or replaces."
    )
    @cached_property
    def computed_impression(self) -> str:
        from reporting.render.narrative.impression import computed_impression_text

        return computed_impression_text(self)

    @computed_field(  # type: ignore[prop-decorator]
        description="SHA-256 (hex) of the canonical form of the findings computed now "
        "(reporting.impression.findings_basis: scores, responses and conclusion codes as sorted "
        "compact JSON, no floats)."
    )
    @cached_property
    def findings_sha256(self) -> str:
        from reporting.impression import findings_sha256

        return findings_sha256(self)

    def model_copy(self, *, update: Mapping[str, Any] | None = None, deep: bool = False) -> Self:
        """A copy; one whose ``update`` may change what the derived values are made from makes
        them again when read (only a new impression status or comparison keeps them)."""
        copied = super().model_copy(update=update, deep=deep)
        if update and not KEEPS_DERIVED.issuperset(update):
            for name in DERIVED_FIELDS:
                copied.__dict__.pop(name, None)
        return copied

    @model_validator(mode="wrap")
    @classmethod
    def _stored_derived(cls, data: Any, handler: ValidatorFunctionWrapHandler) -> Self:
        """A record read back keeps its written computed impression and findings hash."""
        if not isinstance(data, dict) or not DERIVED_FIELDS.intersection(data):
            return cast(Self, handler(data))
        rest = {k: v for k, v in data.items() if k not in DERIVED_FIELDS}
        stored = {k: data[k] for k in DERIVED_FIELDS if k in data}
        for name, value in stored.items():
            if not isinstance(value, str):
                raise ValueError(f"{name}: expected text, got {type(value).__name__}")
        analysis = cast(Self, handler(rest))
        analysis.__dict__.update(stored)  # what cached_property would have stored
        return analysis


DERIVED_FIELDS = frozenset(Analysis.model_computed_fields)
"""Record keys made from the rest of the analysis on first use (Analysis's computed fields)."""
KEEPS_DERIVED = frozenset({"impression_status", "comparison"})
"""Fields an :meth:`Analysis.model_copy` may change and keep the derived values already made: the
computed impression and the findings hash read neither."""
