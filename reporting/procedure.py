"""How the test was run, as a lab records it: baseline rhythm and ECG, medications relevant to the
test, why it was stopped, complications and arrhythmias, and the vasodilator agent and dose.

Every answer is a closed vocabulary (a :class:`~enum.StrEnum` with one docstring per member), so
the record holds categories that a registry can count and a de-identified extract can keep; detail
beyond them belongs in the reader's comments. The input models here are part of the study file
(:class:`reporting.model.Study` fields ``procedure`` and ``vasodilator``); their record form is
:class:`reporting.results.ProcedureSummary`. Stopping rules: Hoffmann R et al., JACC 1996;27:330
and the ACC/AHA exercise-testing guideline (Gibbons RJ et al., 2002 update; from memory).
"""

from enum import StrEnum
from typing import Any, Self

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator
from pydantic_core import PydanticCustomError

from reporting.vocabulary import Vocabulary


class BaselineRhythm(Vocabulary):
    """Cardiac rhythm on the resting ECG before stress."""

    SINUS = "sinus"
    """Sinus rhythm."""
    ATRIAL_FIBRILLATION = "atrial_fibrillation"
    """Atrial fibrillation."""
    ATRIAL_FLUTTER = "atrial_flutter"
    """Atrial flutter."""
    PACED = "paced"
    """Paced rhythm (atrial, ventricular or both)."""
    OTHER = "other"
    """Another rhythm (describe it in the comments)."""


class BaselineEcg(Vocabulary):
    """A finding on the resting ECG; several may apply."""

    NORMAL = "normal"
    """No abnormality on the resting ECG."""
    LEFT_BUNDLE_BRANCH_BLOCK = "left_bundle_branch_block"
    """Left bundle branch block."""
    RIGHT_BUNDLE_BRANCH_BLOCK = "right_bundle_branch_block"
    """Right bundle branch block."""
    VENTRICULAR_PACING = "ventricular_pacing"
    """Ventricular paced complexes."""
    PRE_EXCITATION = "pre_excitation"
    """Ventricular pre-excitation."""
    LV_HYPERTROPHY = "lv_hypertrophy"
    """Left-ventricular hypertrophy with repolarisation changes."""
    RESTING_ST_DEPRESSION = "resting_st_depression"
    """ST depression at rest."""
    Q_WAVES = "q_waves"
    """Pathological Q waves (prior infarction)."""
    OTHER = "other"
    """Another finding (describe it in the comments)."""


class MedicationUse(Vocabulary):
    """Whether a medication that changes the response to stress was taken before the test."""

    NOT_PRESCRIBED = "not_prescribed"
    """The patient does not take it."""
    TAKEN = "taken"
    """Taken as usual before the test (it may blunt the response to stress)."""
    WITHHELD = "withheld"
    """Prescribed but withheld before the test, as the protocol asks."""


class StopReason(Vocabulary):
    """Why stress was stopped; several may apply."""

    TARGET_HEART_RATE = "target_heart_rate"
    """Target heart rate reached."""
    PROTOCOL_COMPLETE = "protocol_complete"
    """Protocol completed (maximal dose, infusion finished or highest workload)."""
    FATIGUE = "fatigue"
    """Fatigue or exhaustion (exercise)."""
    DYSPNOEA = "dyspnoea"
    """Limiting breathlessness."""
    ANGINA = "angina"
    """Limiting or severe angina."""
    NEW_WALL_MOTION_ABNORMALITY = "new_wall_motion_abnormality"
    """New or worsening wall-motion abnormality on imaging."""
    ST_CHANGE = "st_change"
    """Marked ST-segment change."""
    HYPERTENSION = "hypertension"
    """Severe hypertensive response."""
    HYPOTENSION = "hypotension"
    """Fall in blood pressure."""
    ARRHYTHMIA = "arrhythmia"
    """Significant arrhythmia."""
    SIDE_EFFECTS = "side_effects"
    """Intolerable side effects of the stress agent."""
    PATIENT_REQUEST = "patient_request"
    """At the patient's request."""
    OTHER = "other"
    """Another reason (describe it in the comments)."""


class Complication(Vocabulary):
    """A complication of the test other than an arrhythmia."""

    NONE = "none"
    """No complication."""
    SYMPTOMATIC_HYPOTENSION = "symptomatic_hypotension"
    """Hypotension with symptoms."""
    SEVERE_HYPERTENSION = "severe_hypertension"
    """Severe hypertension."""
    PROLONGED_ANGINA = "prolonged_angina"
    """Angina lasting into recovery or needing treatment."""
    BRONCHOSPASM = "bronchospasm"
    """Bronchospasm."""
    SYNCOPE = "syncope"
    """Syncope or presyncope."""
    ALLERGIC_REACTION = "allergic_reaction"
    """Allergic or hypersensitivity reaction (stress or enhancing agent)."""
    OTHER = "other"
    """Another complication (describe it in the comments)."""


class Arrhythmia(Vocabulary):
    """An arrhythmia seen during stress or recovery."""

    NONE = "none"
    """No arrhythmia."""
    ATRIAL_ECTOPY = "atrial_ectopy"
    """Atrial ectopic beats."""
    VENTRICULAR_ECTOPY = "ventricular_ectopy"
    """Ventricular ectopic beats."""
    NON_SUSTAINED_VT = "non_sustained_vt"
    """Non-sustained ventricular tachycardia."""
    SUSTAINED_VT = "sustained_vt"
    """Sustained ventricular tachycardia."""
    VENTRICULAR_FIBRILLATION = "ventricular_fibrillation"
    """Ventricular fibrillation."""
    ATRIAL_FIBRILLATION = "atrial_fibrillation"
    """New atrial fibrillation or flutter."""
    SUPRAVENTRICULAR_TACHYCARDIA = "supraventricular_tachycardia"
    """Supraventricular tachycardia."""
    AV_BLOCK = "av_block"
    """Atrioventricular block."""
    OTHER = "other"
    """Another arrhythmia (describe it in the comments)."""


class VasodilatorAgent(Vocabulary):
    """Vasodilator stress agent, by generic name."""

    ADENOSINE = "adenosine"
    """Adenosine, an infusion dosed in μg/kg/min."""
    REGADENOSON = "regadenoson"
    """Regadenoson, a fixed bolus dosed in mg."""
    DIPYRIDAMOLE = "dipyridamole"
    """Dipyridamole, an infusion whose total dose is given in mg/kg."""


DOSE_FIELD: dict[VasodilatorAgent, str] = {
    VasodilatorAgent.ADENOSINE: "dose_ug_kg_min",
    VasodilatorAgent.REGADENOSON: "dose_mg",
    VasodilatorAgent.DIPYRIDAMOLE: "dose_mg_kg",
}
"""The dose field that carries each agent's dose, in the unit it is prescribed in."""
DOSE_UNITS = {"dose_ug_kg_min": "μg/kg/min", "dose_mg": "mg", "dose_mg_kg": "mg/kg"}
"""Units of each dose field, as printed."""


class ImageQuality(Vocabulary):
    """Image quality at one stage, as the reader judged it."""

    GOOD = "good"
    """All segments well seen."""
    ADEQUATE = "adequate"
    """Diagnostic, with some segments less well seen."""
    POOR = "poor"
    """Interpretation limited by image quality."""


class _Input(BaseModel):
    model_config = ConfigDict(
        extra="forbid", frozen=True, str_strip_whitespace=True, allow_inf_nan=False
    )


def _categories(values: list[Any], alone: StrEnum | None) -> list[Any]:
    """A list of categories: at least one, no repeats, and ``alone`` (none/normal) by itself."""
    if not values:
        raise PydanticCustomError(
            "empty_list", "give at least one entry, or leave the field out when not recorded", {}
        )
    repeated = sorted({str(v.value) for v in values if values.count(v) > 1})
    if repeated:
        raise PydanticCustomError(
            "duplicate", "{entries} given more than once", {"entries": ", ".join(repeated)}
        )
    if alone is not None and alone in values and len(values) > 1:
        raise PydanticCustomError(
            "alone_with_others",
            "'{alone}' cannot be combined with other entries",
            {"alone": alone.value},
        )
    return values


class Medications(_Input):
    """Medications that change the response to stress, and whether they were taken before the test."""

    beta_blocker: MedicationUse | None = Field(
        default=None, description="Beta-blocker: not_prescribed, taken or withheld."
    )
    rate_limiting_calcium_channel_blocker: MedicationUse | None = Field(
        default=None,
        description="Rate-limiting (non-dihydropyridine) calcium-channel blocker: not_prescribed, "
        "taken or withheld.",
    )
    nitrate: MedicationUse | None = Field(
        default=None, description="Nitrate: not_prescribed, taken or withheld."
    )


class Procedure(_Input):
    """How the test was run: baseline ECG, medications, why it stopped, what happened."""

    baseline_rhythm: BaselineRhythm | None = Field(
        default=None, description="Rhythm on the resting ECG."
    )
    baseline_ecg: list[BaselineEcg] | None = Field(
        default=None,
        description="Findings on the resting ECG ('normal' stands alone).",
    )
    medications: Medications | None = Field(
        default=None, description="Medications relevant to the test."
    )
    stop_reasons: list[StopReason] | None = Field(
        default=None, description="Why stress was stopped (one or more)."
    )
    complications: list[Complication] | None = Field(
        default=None,
        description="Complications other than arrhythmias ('none' stands alone).",
    )
    arrhythmias: list[Arrhythmia] | None = Field(
        default=None,
        description="Arrhythmias during stress or recovery ('none' stands alone).",
    )

    @field_validator("baseline_ecg")
    @classmethod
    def _ecg(cls, value: list[BaselineEcg] | None) -> list[BaselineEcg] | None:
        return None if value is None else _categories(value, BaselineEcg.NORMAL)

    @field_validator("stop_reasons")
    @classmethod
    def _stop_reasons(cls, value: list[StopReason] | None) -> list[StopReason] | None:
        return None if value is None else _categories(value, None)

    @field_validator("complications")
    @classmethod
    def _complications(cls, value: list[Complication] | None) -> list[Complication] | None:
        return None if value is None else _categories(value, Complication.NONE)

    @field_validator("arrhythmias")
    @classmethod
    def _arrhythmias(cls, value: list[Arrhythmia] | None) -> list[Arrhythmia] | None:
        return None if value is None else _categories(value, Arrhythmia.NONE)


class Vasodilator(_Input):
    """Vasodilator agent and dose (vasodilator studies only); the dose field follows the agent's unit."""

    agent: VasodilatorAgent = Field(
        description="Generic name of the agent: adenosine, regadenoson or dipyridamole."
    )
    dose_ug_kg_min: float | None = Field(
        default=None, gt=0, le=300, description="Infusion rate in μg/kg/min (adenosine)."
    )
    dose_mg: float | None = Field(
        default=None, gt=0, le=10, description="Bolus dose in mg (regadenoson)."
    )
    dose_mg_kg: float | None = Field(
        default=None, gt=0, le=2, description="Total dose in mg/kg (dipyridamole)."
    )

    @model_validator(mode="after")
    def _dose_in_the_agent_unit(self) -> Self:
        wanted = DOSE_FIELD[self.agent]
        for name in DOSE_UNITS:
            if name != wanted and getattr(self, name) is not None:
                raise PydanticCustomError(
                    "dose_unit",
                    "{agent} is dosed in {unit}: give {wanted}, not {name}",
                    {
                        "agent": self.agent.value,
                        "unit": DOSE_UNITS[wanted],
                        "wanted": wanted,
                        "name": name,
                    },
                )
        return self

    def dose(self) -> tuple[float, str] | None:
        """The dose and its unit, or ``None`` when no dose was recorded."""
        field = DOSE_FIELD[self.agent]
        value = getattr(self, field)
        return None if value is None else (float(value), DOSE_UNITS[field])
