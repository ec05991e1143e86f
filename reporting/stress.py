"""Stress adequacy and exercise indices: heart-rate targets, rate–pressure product, Duke score.

Age-predicted maximum heart rate 220 − age (Fox 1971) or 208 − 0.7 × age (Tanaka H et al., JACC
2001;37:153); target 85 % of it (a negative study below target is non-diagnostic: Ballal RS et al.,
1997). Duke treadmill score and risk bands: Mark DB et al., NEJM 1991;325:849. Heart-rate recovery
in the first minute is abnormal at or below a cut-off: ≤ 18 bpm when the patient lies down at once
for stress-echo imaging (Watanabe J et al., Circulation 2001;104:1911), ≤ 12 bpm after a cool-down
walk (Cole CR et al., NEJM 1999;341:1351); the cut-off is a lab setting. Exercise-induced
hypotension: Gibbons RJ et al., ACC/AHA exercise testing guideline update 2002 (from memory).

The adequacy rule and its wording live here (:func:`assess_adequacy`); the analysis only asks.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from reporting.settings import HeartRateFormula
from reporting.vocabulary import Vocabulary
from reporting.wording import shown_target_bpm


class DukeRisk(Vocabulary):
    """Risk band of the Duke treadmill score (Mark 1991)."""

    LOW = "low"
    """Score ≥ +5."""
    INTERMEDIATE = "intermediate"
    """Score from −10 to +4."""
    HIGH = "high"
    """Score ≤ −11."""


SETTLED_DECIMALS = 9
"""Decimals kept of a sum or difference of recorded values (:func:`settled`)."""


def settled(value: float) -> float:
    """``value``, a sum or difference of recorded decimals, without binary floating-point noise.

    In binary 65.1 − 55.1 is 9.999999999999993, so an EF fall of exactly 10 points would miss a
    "≥ 10 points" threshold; rounded to :data:`SETTLED_DECIMALS` places it is 10. Recorded values
    carry a few decimals at most, so the rounding loses nothing (common practice).
    """
    return round(value, SETTLED_DECIMALS)


def age_predicted_max_hr(age_years: float, formula: HeartRateFormula) -> float:
    """Age-predicted maximum heart rate in bpm."""
    if formula is HeartRateFormula.TANAKA:
        return 208 - 0.7 * age_years
    return 220 - age_years


def rate_pressure_product(heart_rate_bpm: int, systolic_bp_mmhg: int) -> int:
    """Heart rate × systolic pressure (bpm·mmHg)."""
    return heart_rate_bpm * systolic_bp_mmhg


def duke_treadmill_score(
    duration_min: float, max_st_deviation_mm: float, angina_index: int
) -> float:
    """Minutes of exercise − 5 × ST deviation (mm) − 4 × angina index (Mark 1991), settled so that
    a score exactly at a band's edge (−11, +5) falls in the band the table gives it."""
    return settled(duration_min - 5 * max_st_deviation_mm - 4 * angina_index)


def duke_risk(score: float, low_min: float, high_max: float) -> DukeRisk:
    """Band of a Duke score: low from ``low_min``, high up to ``high_max``, intermediate between."""
    if score >= low_min:
        return DukeRisk.LOW
    if score <= high_max:
        return DukeRisk.HIGH
    return DukeRisk.INTERMEDIATE


@dataclass(frozen=True)
class Adequacy:
    """Whether stress was adequate, and why, in the words of the report."""

    adequate: bool
    note: str
    age_unknown: bool = False


def assess_adequacy(
    *,
    rate_dependent: bool,
    stress_imaged: bool,
    peak_recorded: bool,
    age_years: float | None,
    peak_hr_bpm: int | None,
    predicted_bpm: float | None,
    target_fraction: float,
) -> Adequacy:
    """Adequacy of stress: the heart-rate target (a fraction of the age-predicted maximum) reached.

    A negative study below the target is non-diagnostic (Ballal RS et al., 1997). Vasodilator
    stress is not rate-dependent, so only the presence of a peak stage is asked for. A study without
    any stress stage says so, rather than calling the stress inadequate.
    """
    if not stress_imaged:
        return Adequacy(False, "No stress images were recorded.")
    if not rate_dependent:
        if peak_recorded:
            return Adequacy(True, "Vasodilator stress: the heart-rate target does not apply.")
        return Adequacy(False, "No peak stage was recorded.")
    if not peak_recorded:
        return Adequacy(False, "No peak stage was recorded, so adequacy is not established.")
    if age_years is None or predicted_bpm is None:
        return Adequacy(
            False,
            "Age unknown: the target heart rate cannot be computed, so adequacy is not established.",
            age_unknown=True,
        )
    if peak_hr_bpm is None:
        return Adequacy(
            False, "No heart rate was recorded at a stress stage, so adequacy is not established."
        )
    target = predicted_bpm * target_fraction
    adequate = peak_hr_bpm >= target
    verb = "reached" if adequate else "did not reach"
    return Adequacy(
        adequate,
        f"Peak heart rate {peak_hr_bpm} bpm {verb} the target of {shown_target_bpm(target)} bpm "
        f"({100 * target_fraction:g} % of the age-predicted maximum {predicted_bpm:g} bpm).",
    )


def exercise_hypotension(
    rest_sbp_mmhg: int | None, exercise_sbp_mmhg: Sequence[int], fall_above_mmhg: float
) -> str | None:
    """Why the blood-pressure response to exercise is hypotensive, or None if it is not.

    ``exercise_sbp_mmhg`` holds the systolic pressures recorded during exercise in order, the last
    one at peak. Hypotensive: peak below rest, or a fall of more than ``fall_above_mmhg`` from the
    highest exercise pressure. A single exercise pressure above rest grades nothing.
    """
    if not exercise_sbp_mmhg:
        return None
    peak = exercise_sbp_mmhg[-1]
    if rest_sbp_mmhg is not None and peak < rest_sbp_mmhg:
        return f"peak systolic pressure {peak} mmHg, below the resting {rest_sbp_mmhg} mmHg"
    highest = max(exercise_sbp_mmhg)
    if highest - peak > fall_above_mmhg:
        return f"systolic pressure fell from {highest} mmHg during exercise to {peak} mmHg at peak"
    return None


def hr_recovery_abnormal(fall_bpm: float, abnormal_max_bpm: float) -> bool:
    """Heart-rate recovery at 1 minute is abnormal when the fall is at or below the cut-off."""
    return fall_bpm <= abnormal_max_bpm
