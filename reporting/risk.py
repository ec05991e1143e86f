"""Risk as the noninvasive risk tables grade it: low, intermediate, high or not graded.

High (> 3 %/yr death or MI): any high-risk finding (:mod:`reporting.findings`). Intermediate
(1–3 %/yr): resting LVEF 35–49 %, reversible perfusion defects in 5 to < 10 % of the myocardium,
limited inducible ischaemia (one or two segments, one coronary bed), Duke score −10…+4. Low (< 1 %/yr):
Duke score ≥ +5, or no inducible ischaemia (normal stress wall motion and perfusion, or no change of
resting abnormalities). Sources: Gibbons RJ et al., ACC/AHA chronic stable angina guideline update
2002, noninvasive risk stratification table [C]; Fihn SD et al., Circulation 2012;126:e354 (from
memory) [M]. A non-diagnostic study that meets no criterion is not graded. The band is the highest
met; the criteria listed are those of that band.
"""

from __future__ import annotations

from reporting import stress
from reporting.model import Stage, Study
from reporting.results import (
    DiagnosticStatus,
    FindingCode,
    HighRiskFinding,
    RiskCriterion,
    RiskLevel,
    StressResult,
)
from reporting.settings import Settings
from reporting.wording import number_list

_ORDER = (RiskLevel.HIGH, RiskLevel.INTERMEDIATE, RiskLevel.LOW)
_ISCHEMIA_HIGH = frozenset(
    {
        FindingCode.EXTENSIVE_ISCHEMIA,
        FindingCode.MULTIVESSEL_ISCHEMIA,
        FindingCode.LOW_THRESHOLD_ISCHEMIA,
        FindingCode.LARGE_PERFUSION_DEFECT,
    }
)
RISK_TABLE_SOURCE = (
    "Noninvasive risk stratification table: Gibbons RJ et al., ACC/AHA chronic stable angina "
    "guideline update 2002 [C]; Fihn SD et al., Circulation 2012;126:e354 (from memory) [M]"
)


def grade_risk(
    study: Study,
    settings: Settings,
    *,
    status: DiagnosticStatus,
    ischemic_segments: list[int],
    reversible_percent: float,
    high_risk: list[HighRiskFinding],
    stress_result: StressResult,
) -> tuple[RiskLevel, list[RiskCriterion]]:
    """The risk band and the criteria that set it."""
    met = [
        RiskCriterion(code=f.code, level=RiskLevel.HIGH, detail=f.detail, source=f.source)
        for f in high_risk
    ]

    def add(code: FindingCode, level: RiskLevel, detail: str, setting: str | None) -> None:
        source = settings.cited(setting) if setting else RISK_TABLE_SOURCE
        met.append(RiskCriterion(code=code, level=level, detail=detail, source=source))

    rest = study.stages.get(Stage.REST)
    ef = rest.lvef_percent if rest is not None else None
    if (
        ef is not None
        and settings.resting_ef_high_risk_below_percent
        <= ef
        < settings.resting_ef_intermediate_below_percent
    ):
        add(
            FindingCode.REDUCED_RESTING_EF,
            RiskLevel.INTERMEDIATE,
            f"Resting LVEF {ef:g} %.",
            "resting_ef_intermediate_below_percent",
        )
    if (
        settings.moderate_perfusion_defect_percent_min
        <= reversible_percent
        < settings.large_perfusion_defect_percent_min
    ):
        add(
            FindingCode.MODERATE_PERFUSION_DEFECT,
            RiskLevel.INTERMEDIATE,
            f"Reversible perfusion defects in {reversible_percent:.1f} % of the myocardium.",
            "moderate_perfusion_defect_percent_min",
        )
    if status is DiagnosticStatus.ISCHEMIA and not any(f.code in _ISCHEMIA_HIGH for f in high_risk):
        count = len(ischemic_segments)
        add(
            FindingCode.LIMITED_ISCHEMIA,
            RiskLevel.INTERMEDIATE,
            f"Inducible ischaemia in {count} segment{'s' if count != 1 else ''} "
            f"({number_list(ischemic_segments)}), one coronary bed.",
            None,
        )
    duke, band = stress_result.duke_treadmill_score, stress_result.duke_risk
    if duke is not None and band is stress.DukeRisk.INTERMEDIATE:
        add(
            FindingCode.DUKE_INTERMEDIATE_RISK,
            RiskLevel.INTERMEDIATE,
            f"Duke treadmill score {duke:g}.",
            "duke_low_risk_min",
        )
    if duke is not None and band is stress.DukeRisk.LOW:
        add(
            FindingCode.DUKE_LOW_RISK,
            RiskLevel.LOW,
            f"Duke treadmill score {duke:g}.",
            "duke_low_risk_min",
        )
    if status is DiagnosticStatus.NO_ISCHEMIA:
        add(
            FindingCode.NO_INDUCIBLE_ISCHEMIA,
            RiskLevel.LOW,
            "No inducible ischaemia at adequate stress.",
            None,
        )
    for level in _ORDER:
        chosen = [c for c in met if c.level is level]
        if chosen:
            return level, chosen
    return RiskLevel.NOT_GRADED, []
