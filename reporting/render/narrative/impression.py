"""The answer of the study: the one-sentence summary, the impression by territory and the
high-risk findings.

Wording rules: a study without ischaemia below the target heart rate is called non-diagnostic for
ischaemia, never normal (Ballal RS et al., 1997); akinesis turning dyskinetic is reported on its own
and never as ischaemia (Elhendy A et al., Chest 1996; Sozzi FB et al., JASE 2007); extent follows
Kataoka A et al., Cardiovasc Ultrasound 2015;13:47 (mild 1–2, moderate–severe ≥ 3 segments), counting
wall-motion and perfusion ischaemia together; ischaemia seen only in recovery is ischaemia and is said
to be so (Marwick TH, Heart 2003;89:113); RCA or LCx apical ischaemia beside LAD ischaemia reads
"LAD, possibly wrapping around the apex" (Ortiz-Pérez JT et al., JACC Cardiovasc Imaging 2008;1:282);
a study with no stress stage says "no stress images"; risk bands follow the noninvasive risk tables.
"""

from __future__ import annotations

from reporting.model import STRESS_STAGES, Stage
from reporting.notes import NoteKind
from reporting.render.narrative.words import (
    EXTENT_WORDS,
    FINDING_LABELS,
    RISK_WORDS,
    WALL_MOTION_WORDS,
    lower_first,
    numbers,
    segments_phrase,
    sentence_case,
)
from reporting.results import (
    Analysis,
    DiagnosticStatus,
    NonDiagnosticReason,
    RiskLevel,
    SegmentResult,
    TerritoryStatus,
)
from reporting.scoring import WallMotionResponse
from reporting.segments import Territory
from reporting.vocabulary import Vocabulary
from reporting.wording import shown_percent, shown_target_bpm, stage_words


class Question(Vocabulary):
    """What the referral question asks (decided from its words, else the indication's)."""

    ISCHEMIA = "ischemia"
    """Inducible ischaemia: where, how much, what risk."""
    VIABILITY = "viability"
    """Viable myocardium in segments abnormal at rest."""


VIABILITY_WORDS = ("viab", "hibernat", "recover")


def question(analysis: Analysis) -> Question:
    """The kind of question the headline answers: the referral question, else the indication."""
    study = analysis.study
    text = (study.referral_question or study.indication or "").lower()
    return Question.VIABILITY if any(w in text for w in VIABILITY_WORDS) else Question.ISCHEMIA


def summary(analysis: Analysis) -> str:
    """The headline: the answer to the referral question first, then the ischaemia answer."""
    if question(analysis) is Question.VIABILITY:
        return f"{viability_answer(analysis)} {ischemia_answer(analysis)}"
    return ischemia_answer(analysis)


def viability_answer(analysis: Analysis) -> str:
    """How many segments abnormal at rest are viable, and what that implies, cautiously."""
    c = analysis.conclusion
    by_response = {s.number: s.response for s in analysis.segments}
    biphasic = [n for n in c.viable_segments if by_response[n] is WallMotionResponse.BIPHASIC]
    sustained = [
        n for n in c.viable_segments if by_response[n] is WallMotionResponse.SUSTAINED_IMPROVEMENT
    ]
    dysfunctional = len(abnormal_at_baseline(analysis))
    if Stage.LOW_DOSE not in analysis.stages:
        return "Viability not assessable: no low-dose stage was imaged."
    if not dysfunctional:
        return "Viability: no segment was abnormal at rest, so there was no dysfunctional myocardium to assess."
    kinds = []
    if biphasic:
        kinds.append(f"biphasic in {segments_phrase(biphasic)}")
    if sustained:
        kinds.append(f"sustained improvement in {segments_phrase(sustained)}")
    if not c.viable_segments:
        return (
            f"Viability: none of the {dysfunctional} segment{'s' if dysfunctional != 1 else ''} "
            "abnormal at rest improved at low dose; recovery of their function after "
            "revascularisation is unlikely."
        )
    viable = len(c.viable_segments)
    head = (
        f"Viability: {viable} of {dysfunctional} segment{'s' if dysfunctional != 1 else ''} "
        f"abnormal at rest {'is' if viable == 1 else 'are'} viable ({'; '.join(kinds)})"
    )
    if any(n.kind is NoteKind.VIABILITY for n in analysis.notes):
        return (
            f"{head}; with {len(biphasic)} biphasic segments, recovery of global function after "
            "revascularisation is likely, though not certain."
        )
    return (
        f"{head}; fewer biphasic segments than predicted recovery of global function, so global "
        "recovery is less likely, though viable segments may regain function."
    )


def abnormal_at_baseline(analysis: Analysis) -> list[int]:
    """Segments abnormal (score above 1) at their baseline stage: the dysfunctional myocardium."""
    return [
        s.number
        for s in analysis.segments
        if s.baseline_stage is not None and (s.wall_motion.get(s.baseline_stage) or 0) > 1
    ]


def ischemia_answer(analysis: Analysis) -> str:
    """Where, how much (extent in segments), and the risk band with its criteria."""
    c = analysis.conclusion
    if c.status is DiagnosticStatus.ISCHEMIA:
        wrap = set(c.wrap_around_segments)
        named = [
            t
            for t in c.ischemic_territories
            if not set(_ischemic_in(analysis, t)) <= wrap or not wrap
        ]
        where = numbers(t.value for t in named)
        noun = "territories" if len(named) != 1 else "territory"
        if wrap:
            where += (
                f" {noun} (LAD, possibly wrapping around the apex: {segments_phrase(sorted(wrap))})"
            )
            noun = ""
        count = len(c.ischemic_segments)
        how = ""
        if not c.ischemic_segment_count:
            how = " by reversible perfusion defects only"
        elif c.ischemic_segment_count != count:
            how = " by wall motion or perfusion"
        pattern = ", multivessel pattern" if c.multivessel else ""
        extent = (
            f"{EXTENT_WORDS[c.ischemia_extent]} ischaemia{how}: "
            f"{count} segment{'s' if count != 1 else ''}{pattern}"
        )
        answer = f"Positive for inducible ischaemia in the {where}{' ' + noun if noun else ''}; {extent}."
    elif c.status is DiagnosticStatus.NO_ISCHEMIA:
        answer = "Negative for inducible ischaemia at adequate stress."
    elif c.non_diagnostic_reason is NonDiagnosticReason.NO_STRESS_IMAGES:
        answer = "Non-diagnostic for ischaemia: no stress images were recorded."
    else:
        answer = f"Non-diagnostic for ischaemia: no ischaemia was shown, but {non_diagnostic_reason(analysis)}."
    risk = risk_clause(analysis)
    return f"{answer} {risk}" if risk else answer


def risk_clause(analysis: Analysis) -> str:
    """``High risk: extensive ischaemia and multivessel pattern.``; nothing when not graded."""
    c = analysis.conclusion
    if c.risk is RiskLevel.NOT_GRADED:
        return ""
    labels = dict.fromkeys(lower_first(FINDING_LABELS[r.code]) for r in c.risk_criteria)
    criteria = f": {numbers(labels)}" if labels else ""
    return f"{c.risk.value.capitalize()} risk{criteria}."


def unscored_stages(analysis: Analysis) -> list[Stage]:
    """Stages with no wall-motion score at all: not scored yet (a draft), not 'not visualised'."""
    return [
        stage
        for stage in analysis.stages
        if all(s.wall_motion.get(stage) is None for s in analysis.segments)
    ]


def _ischemic_in(analysis: Analysis, territory: Territory) -> list[int]:
    t = analysis.territories[territory]
    return t.ischemic_segments + t.ischemic_perfusion_segments


def non_diagnostic_reason(analysis: Analysis) -> str:
    s = analysis.stress
    unscored = [st for st in unscored_stages(analysis) if st in STRESS_STAGES]
    stressed = [st for st in analysis.stages if st in STRESS_STAGES]
    if unscored and unscored == stressed:
        words = numbers(stage_words(st, analysis.protocol) for st in unscored)
        return f"{words} {'is' if len(unscored) == 1 else 'are'} not scored yet"
    if analysis.conclusion.non_diagnostic_reason is NonDiagnosticReason.TERRITORY_NOT_ASSESSABLE:
        unread = [
            t.value
            for t, r in analysis.territories.items()
            if r.status is TerritoryStatus.NON_DIAGNOSTIC
        ]
        noun = "territories" if len(unread) != 1 else "territory"
        return (
            f"no segment of the {numbers(unread)} {noun} could be assessed at both baseline and "
            "stress, so ischaemia is not excluded there"
        )
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
    if Stage.PEAK not in analysis.stages:
        return "no peak stage was recorded, so adequacy of stress is not established"
    return "adequate stress was not established, so ischaemia is not excluded"


def computed_impression_text(analysis: Analysis) -> str:
    """The computed findings as plain text, one paragraph per line: the draft impression."""
    return "\n".join(impression(analysis))


def impression(analysis: Analysis) -> list[str]:
    by_number = {s.number: s for s in analysis.segments}
    pending = _pending_stress_stages(analysis)
    paragraphs = [summary(analysis)]
    paragraphs += [_territory_sentence(analysis, t, by_number, pending) for t in Territory]
    dysk = analysis.conclusion.akinetic_to_dyskinetic_segments
    if dysk:
        paragraphs.append(
            f"Akinesis turning dyskinetic at stress in {segments_phrase(dysk)}: a mechanical finding, not counted as ischaemia."
        )
    paragraphs.append(f"Territories follow the map '{analysis.territory_map.title}'.")
    shared = shared_supply_sentence(analysis)
    if shared:
        paragraphs.append(shared)
    return paragraphs


def shared_supply_sentence(analysis: Analysis) -> str:
    """Only when a segment the conclusion rests on is often supplied by another artery."""
    matters = set(analysis.conclusion.ischemic_segments) | set(analysis.conclusion.viable_segments)
    shared = [s for s in analysis.segments if s.shared_supply and s.number in matters]
    if not shared:
        return ""
    others = " or ".join(dict.fromkeys(t.value for s in shared for t in s.shared_supply))
    verb = "is" if len(shared) == 1 else "are"
    return (
        f"{sentence_case(segments_phrase([s.number for s in shared]))} {verb} often supplied by "
        f"another artery ({others}), so the territory named is the usual one, not a certain one."
    )


def territory_sentence(analysis: Analysis, territory: Territory) -> str:
    """One territory's findings in a sentence."""
    by_number = {s.number: s for s in analysis.segments}
    return _territory_sentence(analysis, territory, by_number, _pending_stress_stages(analysis))


def _pending_stress_stages(analysis: Analysis) -> list[Stage]:
    return [st for st in unscored_stages(analysis) if st in STRESS_STAGES]


def _territory_sentence(
    analysis: Analysis,
    territory: Territory,
    by_number: dict[int, SegmentResult],
    pending: list[Stage],
) -> str:
    t = analysis.territories[territory]
    mine = [by_number[n] for n in t.segments]
    if not mine:
        return f"{territory.value}: no segments under this map."
    by_response: dict[WallMotionResponse, list[int]] = {}
    for s in mine:
        by_response.setdefault(s.response, []).append(s.number)

    def having(response: WallMotionResponse) -> list[int]:
        return by_response.get(response, [])

    parts = []
    ischemic = having(WallMotionResponse.ISCHEMIC)
    biphasic = having(WallMotionResponse.BIPHASIC)
    if ischemic or biphasic:
        worst = max(
            (by_number[n].wall_motion.get(Stage.PEAK) or 0 for n in t.ischemic_segments), default=0
        )
        at_peak = stage_words(Stage.PEAK, analysis.protocol)
        worst_words = f", at worst {WALL_MOTION_WORDS[worst]} at {at_peak}" if worst > 1 else ""
        parts.append(
            f"inducible ischaemia in {len(t.ischemic_segments)} of {len(mine)} segments ({numbers(t.ischemic_segments)}){worst_words}"
        )
        in_recovery = [
            n for n in t.ischemic_segments if by_number[n].ischemia_onset_stage is Stage.RECOVERY
        ]
        if in_recovery:
            worst_after = max(
                by_number[n].wall_motion.get(Stage.RECOVERY) or 0 for n in in_recovery
            )
            at_worst = f", at worst {WALL_MOTION_WORDS[worst_after]}" if worst_after > 1 else ""
            parts.append(
                f"seen in recovery (after stress) in {segments_phrase(in_recovery)}{at_worst}"
            )
        wrapped = [n for n in t.ischemic_segments if n in analysis.conclusion.wrap_around_segments]
        if wrapped:
            parts.append(f"{segments_phrase(wrapped)}: LAD, possibly wrapping around the apex")
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
    if t.ischemic_perfusion_segments and not (ischemic or biphasic):
        parts.insert(
            0,
            f"inducible ischaemia by perfusion in {len(t.ischemic_perfusion_segments)} of "
            f"{len(mine)} segments ({numbers(t.ischemic_perfusion_segments)})",
        )
    if t.fixed_perfusion_segments:
        parts.append(f"fixed perfusion defect in {segments_phrase(t.fixed_perfusion_segments)}")
    at_low = having(WallMotionResponse.ABNORMAL_AT_LOW_DOSE)
    if at_low:
        parts.append(
            f"abnormal from low dose without a rest view in {segments_phrase(at_low)} (review)"
        )
    unseen = having(WallMotionResponse.NOT_ASSESSABLE)
    if t.status is TerritoryStatus.NON_DIAGNOSTIC and pending:
        words = numbers(stage_words(st, analysis.protocol) for st in pending)
        parts.append(f"not assessable yet ({words} not scored yet)")
    elif t.status is TerritoryStatus.NON_DIAGNOSTIC:
        parts.append("non-diagnostic (no segment seen at both baseline and stress)")
    elif unseen and len(unseen) == len(mine):
        parts.append("wall motion not assessable (segments not seen at baseline and stress)")
    elif unseen:
        parts.append(f"{segments_phrase(unseen)} not assessable")
    wall_motion_found = bool(
        ischemic or biphasic or sustained or t.fixed_segments or dysk or at_low
    )
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


def risk_fact(analysis: Analysis) -> str:
    """``intermediate risk`` or ``risk not graded``, for the answer box."""
    risk = analysis.conclusion.risk
    return "risk not graded" if risk is RiskLevel.NOT_GRADED else f"{risk.value} risk"


def risk_paragraph(analysis: Analysis) -> str:
    """``Risk: intermediate risk (1–3 % per year) by the noninvasive risk tables; criteria met: …``"""
    c = analysis.conclusion
    if c.risk is RiskLevel.NOT_GRADED:
        return "Risk not graded: the study is non-diagnostic and meets no risk criterion."
    labels = dict.fromkeys(lower_first(FINDING_LABELS[r.code]) for r in c.risk_criteria)
    return f"Risk: {RISK_WORDS[c.risk]} by the noninvasive risk tables; criteria met: {numbers(labels)}."


def high_risk_paragraphs(analysis: Analysis) -> list[str]:
    findings = analysis.conclusion.high_risk_findings
    head = [risk_paragraph(analysis)]
    if not findings:
        return [*head, "No high-risk finding identified."]
    return head + [f"{FINDING_LABELS[f.code]} — {lower_first(f.detail)}" for f in findings]
