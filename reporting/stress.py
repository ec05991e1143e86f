"""Stress adequacy and exercise indices: heart-rate targets, rate–pressure product, Duke score.

Age-predicted maximum heart rate 220 − age (Fox 1971) or 208 − 0.7 × age (Tanaka H et al., JACC
2001;37:153); target 85 % of it (a negative study below target is non-diagnostic: Ballal RS et al.,
1997). Duke treadmill score and risk bands: Mark DB et al., NEJM 1991;325:849. Heart-rate recovery
in the first minute is abnormal at or below a cut-off: ≤ 18 bpm when the patient lies down at once
for stress-echo imaging (Watanabe J et al., Circulation 2001;104:1911), ≤ 12 bpm after a cool-down
walk (Cole CR et al., NEJM 1999;341:1351); the cut-off is a lab setting.
"""

from __future__ import annotations

from enum import StrEnum

from reporting.settings import HeartRateFormula


class DukeRisk(StrEnum):
    """Risk band of the Duke treadmill score (Mark 1991)."""

    LOW = "low"
    """Score ≥ +5."""
    INTERMEDIATE = "intermediate"
    """Score from −10 to +4."""
    HIGH = "high"
    """Score ≤ −11."""


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
    """Minutes of exercise − 5 × ST deviation (mm) − 4 × angina index (Mark 1991)."""
    return duration_min - 5 * max_st_deviation_mm - 4 * angina_index


def duke_risk(score: float, low_min: float, high_max: float) -> DukeRisk:
    """Band of a Duke score: low from ``low_min``, high up to ``high_max``, intermediate between."""
    if score >= low_min:
        return DukeRisk.LOW
    if score <= high_max:
        return DukeRisk.HIGH
    return DukeRisk.INTERMEDIATE


def hr_recovery_abnormal(fall_bpm: float, abnormal_max_bpm: float) -> bool:
    """Heart-rate recovery at 1 minute is abnormal when the fall is at or below the cut-off."""
    return fall_bpm <= abnormal_max_bpm
