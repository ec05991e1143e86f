"""Vocabulary and small phrase helpers of the narrative: words for scores, findings and protocols,
lists of segment numbers, signed numbers, and the heart-rate figures as they are printed.

Stage names come from :func:`reporting.wording.stage_words`, shared with the record and the exports.
The heart-rate target is printed rounded up and the percentage of the predicted maximum rounded
down (:func:`shown_target_bpm`, :func:`shown_percent`), so the printed figures always agree with the
adequacy decision: a peak of 140 bpm against a target of 140.25 bpm reads "target 141 bpm" and
"84 %", never "target 140 bpm … not reached".
"""

from __future__ import annotations

from collections.abc import Iterable

from reporting.kinetics.models import ReserveFlag
from reporting.model import Protocol, Stage
from reporting.results import Analysis, FindingCode, RiskLevel, SegmentResult
from reporting.scoring import IschemiaExtent
from reporting.settings import HeartRateFormula
from reporting.wording import WALL_MOTION_WORDS as WALL_MOTION_WORDS
from reporting.wording import and_list, stage_words
from reporting.wording import sentence_case as sentence_case

EXTENT_WORDS = {  # extent by segment count (Kataoka 2015: 1–2, ≥ 3), never severity
    IschemiaExtent.MILD: "limited",
    IschemiaExtent.MODERATE_SEVERE: "extensive",
}
FINDING_LABELS = {
    FindingCode.LOW_THRESHOLD_ISCHEMIA: "Ischaemia at a low threshold",
    FindingCode.EXTENSIVE_ISCHEMIA: "Extensive ischaemia",
    FindingCode.MULTIVESSEL_ISCHEMIA: "Multivessel pattern",
    FindingCode.LOW_RESTING_EF: "Low resting ejection fraction",
    FindingCode.HIGH_PEAK_WMSI: "High peak WMSI",
    FindingCode.LV_DILATION: "LV cavity dilation at stress",
    FindingCode.EF_FALL: "Severe stress-induced LV dysfunction",
    FindingCode.DUKE_HIGH_RISK: "High-risk Duke treadmill score",
    FindingCode.HYPOTENSIVE_RESPONSE: "Hypotensive response to exercise",
    FindingCode.LARGE_PERFUSION_DEFECT: "Large reversible perfusion defect",
    FindingCode.REDUCED_RESTING_EF: "Reduced resting ejection fraction",
    FindingCode.LIMITED_ISCHEMIA: "Limited inducible ischaemia",
    FindingCode.MODERATE_PERFUSION_DEFECT: "Moderate reversible perfusion defect",
    FindingCode.DUKE_INTERMEDIATE_RISK: "Intermediate-risk Duke treadmill score",
    FindingCode.DUKE_LOW_RISK: "Low-risk Duke treadmill score",
    FindingCode.NO_INDUCIBLE_ISCHEMIA: "No inducible ischaemia",
}
RISK_WORDS = {
    RiskLevel.HIGH: "high risk (more than 3 % per year)",
    RiskLevel.INTERMEDIATE: "intermediate risk (1–3 % per year)",
    RiskLevel.LOW: "low risk (less than 1 % per year)",
}
"""Annual death or MI by band, noninvasive risk tables (Gibbons RJ et al., 2002; Fihn SD et al.,
Circulation 2012, from memory)."""
PROTOCOL_WORDS = {
    Protocol.DOBUTAMINE: "Dobutamine stress echocardiography",
    Protocol.TREADMILL: "Treadmill exercise stress echocardiography",
    Protocol.BICYCLE: "Bicycle exercise stress echocardiography",
    Protocol.VASODILATOR: "Vasodilator stress echocardiography",
    Protocol.PACING: "Pacing stress echocardiography",
}
FORMULA_WORDS = {HeartRateFormula.FOX: "220 − age", HeartRateFormula.TANAKA: "208 − 0.7 × age"}
ANGINA_WORDS = {0: "no angina", 1: "non-limiting angina", 2: "exercise-limiting angina"}
RESERVE_FLAG_WORDS = {
    ReserveFlag.LOW_FLOW_RESERVE: "flow reserve",
    ReserveFlag.LOW_BETA_RESERVE: "β reserve",
}


numbers = and_list
"""``1, 2 and 3``."""


def segments_phrase(values: Iterable[int]) -> str:
    """``segment 4`` or ``segments 4 and 10``."""
    items = list(values)
    return f"segment{'s' if len(items) != 1 else ''} {numbers(items)}"


def named_segments(segs: list[SegmentResult]) -> str:
    """``segments 7 (mid anterior) and 8 (mid anteroseptal)``."""
    parts = [f"{s.number} ({s.name})" for s in segs]
    head = "segments" if len(parts) != 1 else "segment"
    if len(parts) <= 1:
        return f"{head} {''.join(parts)}"
    return f"{head} {', '.join(parts[:-1])} and {parts[-1]}"


def dose_words(analysis: Analysis, stage: Stage) -> str:
    """`` (dobutamine 40 μg/kg/min, atropine 0.5 mg)``, or nothing without drugs."""
    h = analysis.haemodynamics.get(stage)
    if h is None:
        return ""
    parts = []
    if h.dose_ug_kg_min is not None:
        parts.append(f"dobutamine {h.dose_ug_kg_min:g} μg/kg/min")
    if h.atropine_mg is not None and h.atropine_mg > 0:
        parts.append(f"atropine {h.atropine_mg:g} mg")
    return f" ({', '.join(parts)})" if parts else ""


def stage_label(analysis: Analysis, stage: Stage) -> str:
    """``Peak (dobutamine 40 μg/kg/min)``: the stage, capitalised, with its drugs (``Peak exercise``
    in a treadmill or bicycle study)."""
    return sentence_case(stage_words(stage, analysis.protocol)) + dose_words(analysis, stage)


def lower_first(text: str) -> str:
    """Lower-case a leading capital unless it starts an abbreviation (``LV``, ``WMSI``)."""
    if len(text) > 1 and text[0].isupper() and text[1].islower():
        return text[0].lower() + text[1:]
    return text


def signed(value: float) -> str:
    """``−6.5`` with a true minus sign; ``18`` without a plus."""
    return f"−{abs(value):g}" if value < 0 else f"{value:g}"
