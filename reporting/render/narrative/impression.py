"""The answer of the study: the one-sentence summary, the impression by territory and the
high-risk findings.

Wording rules: a study without ischaemia below the target heart rate is called non-diagnostic for
ischaemia, never normal (Ballal RS et al., 1997); akinesis turning dyskinetic is reported on its own
and never as ischaemia (Elhendy A et al., Chest 1996; Sozzi FB et al., JASE 2007); extent follows
Kataoka A et al., Cardiovasc Ultrasound 2015;13:47 (mild 1–2, moderate–severe ≥ 3 segments).
"""

from __future__ import annotations

from reporting.model import Stage
from reporting.render.narrative.words import (
    EXTENT_WORDS,
    FINDING_LABELS,
    WORST_WORDS,
    lower_first,
    numbers,
    segments_phrase,
)
from reporting.results import Analysis, DiagnosticStatus
from reporting.scoring import PerfusionResponse, WallMotionResponse
from reporting.segments import Territory
from reporting.wording import shown_percent, shown_target_bpm, stage_words


def summary(analysis: Analysis) -> str:
    """The one-sentence answer of the study."""
    c = analysis.conclusion
    if c.status is DiagnosticStatus.ISCHEMIA:
        where = numbers(t.value for t in c.ischemic_territories)
        noun = "territories" if len(c.ischemic_territories) != 1 else "territory"
        pattern = "; multivessel pattern" if c.multivessel else ""
        if c.ischemic_segment_count:
            extent = f", {c.ischemic_segment_count} segment{'s' if c.ischemic_segment_count != 1 else ''} ({EXTENT_WORDS[c.ischemia_extent]}{pattern})"
        else:
            extent = f" by reversible perfusion defects only{pattern and ' (' + pattern[2:] + ')'}"
        return f"Positive for inducible ischaemia in the {where} {noun}{extent}."
    if c.status is DiagnosticStatus.NO_ISCHEMIA:
        return "Negative for inducible ischaemia at adequate stress."
    return f"Non-diagnostic for ischaemia: no ischaemia was shown, but {non_diagnostic_reason(analysis)}."


def non_diagnostic_reason(analysis: Analysis) -> str:
    s = analysis.stress
    peak_seen = any(
        seg.response is not WallMotionResponse.NOT_ASSESSABLE for seg in analysis.segments
    ) or any(
        seg.perfusion_response is not PerfusionResponse.NOT_ASSESSABLE for seg in analysis.segments
    )
    if Stage.PEAK not in analysis.stages:
        return "no peak stage was recorded"
    if not peak_seen:
        return "no segment could be assessed at both rest and peak"
    if (
        s.heart_rate_target_applies
        and s.peak_hr_bpm is not None
        and s.target_hr_bpm is not None
        and s.peak_hr_percent_of_predicted is not None
    ):
        return (
            f"the target heart rate was not reached (peak {s.peak_hr_bpm} bpm, "
            f"{shown_percent(s.peak_hr_percent_of_predicted)} % of the age-predicted maximum; "
            f"target {shown_target_bpm(s.target_hr_bpm)} bpm), so ischaemia is not excluded"
        )
    return "adequate stress was not established, so ischaemia is not excluded"


def impression(analysis: Analysis) -> list[str]:
    paragraphs = [summary(analysis)]
    paragraphs += [territory_sentence(analysis, t) for t in Territory]
    dysk = analysis.conclusion.akinetic_to_dyskinetic_segments
    if dysk:
        paragraphs.append(
            f"Akinesis turning dyskinetic at stress in {segments_phrase(dysk)}: a mechanical finding, not counted as ischaemia."
        )
    shared = [s.number for s in analysis.segments if s.shared_supply]
    text = f"Territories follow the map '{analysis.territory_map.title}'"
    if shared:
        text += f"; {segments_phrase(shared)} are often supplied by another artery"
    paragraphs.append(text + ".")
    return paragraphs


def territory_sentence(analysis: Analysis, territory: Territory) -> str:
    t = analysis.territories[territory]
    by_number = {s.number: s for s in analysis.segments}
    mine = [by_number[n] for n in t.segments]
    if not mine:
        return f"{territory.value}: no segments under this map."

    def having(response: WallMotionResponse) -> list[int]:
        return [s.number for s in mine if s.response is response]

    parts = []
    ischemic = having(WallMotionResponse.ISCHEMIC)
    biphasic = having(WallMotionResponse.BIPHASIC)
    if ischemic or biphasic:
        worst = max(
            (by_number[n].wall_motion.get(Stage.PEAK) or 0 for n in t.ischemic_segments), default=0
        )
        at_peak = stage_words(Stage.PEAK, analysis.protocol)
        worst_words = (
            f", at worst {WORST_WORDS[worst]} at {at_peak}" if worst in WORST_WORDS else ""
        )
        parts.append(
            f"inducible ischaemia in {len(t.ischemic_segments)} of {len(mine)} segments ({numbers(t.ischemic_segments)}){worst_words}"
        )
    if biphasic:
        parts.append(f"biphasic response (viable and ischaemic) in {segments_phrase(biphasic)}")
    sustained = having(WallMotionResponse.SUSTAINED_IMPROVEMENT)
    if sustained:
        parts.append(f"viable with sustained improvement in {segments_phrase(sustained)}")
    if t.fixed_segments:
        parts.append(
            f"fixed abnormality (no change with stress) in {segments_phrase(t.fixed_segments)}"
        )
    dysk = having(WallMotionResponse.AKINETIC_TO_DYSKINETIC)
    if dysk:
        parts.append(f"akinesis turning dyskinetic in {segments_phrase(dysk)}")
    if t.reversible_perfusion_segments:
        parts.append(
            f"reversible perfusion defect in {segments_phrase(t.reversible_perfusion_segments)}"
        )
    if t.fixed_perfusion_segments:
        parts.append(f"fixed perfusion defect in {segments_phrase(t.fixed_perfusion_segments)}")
    unseen = having(WallMotionResponse.NOT_ASSESSABLE)
    if unseen and len(unseen) == len(mine):
        parts.append("not assessable (segments not visualised at rest or peak)")
    elif unseen:
        parts.append(f"{segments_phrase(unseen)} not assessable")
    wall_motion_found = bool(ischemic or biphasic or sustained or t.fixed_segments or dysk)
    if not wall_motion_found and len(unseen) < len(mine):
        parts.insert(
            0,
            "no wall-motion abnormality at rest or stress"
            if not unseen
            else "no wall-motion abnormality in the segments assessed",
        )
    wmsi = [
        f"{value:.2f} at {stage_words(stage, analysis.protocol)}"
        for stage, value in t.wmsi.items()
        if stage in (Stage.REST, Stage.PEAK) and value is not None
    ]
    tail = f" Territory WMSI {', '.join(wmsi)}." if wmsi else ""
    return f"{territory.value} ({segments_phrase(t.segments)}): {'; '.join(parts)}.{tail}"


def high_risk_paragraphs(analysis: Analysis) -> list[str]:
    findings = analysis.conclusion.high_risk_findings
    if not findings:
        return ["None identified."]
    return [f"{FINDING_LABELS[f.code]} — {lower_first(f.detail)}" for f in findings]
