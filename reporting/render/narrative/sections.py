"""The findings sections of the narrative: stress and adequacy, wall motion per stage, perfusion and
replenishment kinetics. Each builder returns the section's paragraphs as plain text; a section
without content returns none and is left out.

A study below the target heart rate is submaximal, so one without ischaemia is non-diagnostic
(Ballal RS et al., 1997); the Duke treadmill score and its bands follow Mark DB et al., NEJM 1991.
"""

from __future__ import annotations

from reporting.kinetics.models import ReserveFlag
from reporting.model import Stage
from reporting.render.narrative.conduct import hr_recovery_verdict
from reporting.render.narrative.methods import DUKE_SOURCE
from reporting.render.narrative.words import (
    ANGINA_WORDS,
    FORMULA_WORDS,
    PROTOCOL_WORDS,
    RESERVE_FLAG_WORDS,
    WALL_MOTION_WORDS,
    named_segments,
    numbers,
    segments_phrase,
    sentence_case,
    signed,
    stage_label,
)
from reporting.results import Analysis
from reporting.scoring import PerfusionResponse
from reporting.segments import Territory
from reporting.wording import shown_percent, shown_target_bpm, stage_words


def stress_paragraphs(analysis: Analysis, cite: bool = True) -> list[str]:
    """The protocol sentence first (the PDF header reuses it), then adequacy and exercise results.

    Without ``cite`` (the referrer's pages) sources and formulas are left to the Methods line.
    """
    s = analysis.stress
    peak = analysis.haemodynamics.get(Stage.PEAK)
    opening = PROTOCOL_WORDS[analysis.protocol]
    if peak is not None and peak.dose_ug_kg_min is not None:
        opening += f" to {peak.dose_ug_kg_min:g} μg/kg/min"
        if peak.atropine_mg:
            opening += f" with atropine {peak.atropine_mg:g} mg"
    opening += f"; {int(analysis.segment_model)}-segment model."
    paragraphs = [opening]
    if (
        s.heart_rate_target_applies
        and s.peak_hr_bpm is not None
        and s.target_hr_bpm is not None
        and s.age_predicted_max_hr_bpm is not None
        and s.peak_hr_percent_of_predicted is not None
    ):
        verdict = (
            "was reached: adequate stress"
            if s.adequate
            else "was not reached: submaximal stress, so a study without ischaemia is non-diagnostic"
        )
        paragraphs.append(
            f"Peak heart rate {s.peak_hr_bpm} bpm, {shown_percent(s.peak_hr_percent_of_predicted)} % "
            f"of the age-predicted maximum of {s.age_predicted_max_hr_bpm:.0f} bpm"
            f"{f' ({FORMULA_WORDS[s.heart_rate_formula]})' if cite else ''}; the target of "
            f"{shown_target_bpm(s.target_hr_bpm)} bpm ({100 * s.target_fraction:.0f} %) {verdict}."
        )
    else:
        paragraphs.append(s.adequacy_note)
    if Stage.PEAK in s.rate_pressure_product:
        paragraphs.append(
            f"Peak rate–pressure product {s.rate_pressure_product[Stage.PEAK]} bpm·mmHg."
        )
    exercise = exercise_sentence(analysis)
    if exercise:
        paragraphs.append(exercise)
    if s.duke_treadmill_score is not None and s.duke_risk is not None:
        paragraphs.append(
            f"Duke treadmill score {signed(s.duke_treadmill_score)}: {s.duke_risk.value} risk"
            f"{f' ({DUKE_SOURCE})' if cite else ''}."
        )
    if s.mets is not None:
        paragraphs.append(f"Estimated workload {s.mets:g} METs.")
    if s.hr_recovery_1min_bpm is not None:
        paragraphs.append(
            f"Heart-rate recovery {signed(s.hr_recovery_1min_bpm)} bpm in the first minute after exercise"
            f"{hr_recovery_verdict(s, cite)}."
        )
    return paragraphs


def exercise_sentence(analysis: Analysis) -> str:
    """``Exercise time 7.5 min; maximal ST deviation 2 mm; non-limiting angina (angina index 1).``"""
    s = analysis.stress
    parts = []
    if s.exercise_duration_min is not None:
        parts.append(f"exercise time {s.exercise_duration_min:g} min")
    if s.max_st_deviation_mm is not None:
        parts.append(f"maximal ST deviation {s.max_st_deviation_mm:g} mm")
    if s.angina_index is not None:
        parts.append(f"{ANGINA_WORDS[s.angina_index]} (angina index {s.angina_index})")
    return sentence_case("; ".join(parts)) + "." if parts else ""


def wall_motion_paragraphs(analysis: Analysis) -> list[str]:
    out = []
    for stage in analysis.stages:
        if stage not in analysis.segments[0].wall_motion:
            text = f"{stage_label(analysis, stage)}: wall motion not scored yet."
        else:
            text = f"{stage_label(analysis, stage)}: {stage_wall_motion(analysis, stage)}"
        h = analysis.haemodynamics.get(stage)
        if h is not None:
            extra = []
            if h.lvef_percent is not None:
                extra.append(f"LVEF {h.lvef_percent:g} %")
            if h.lv_esv_ml is not None:
                extra.append(f"end-systolic volume {h.lv_esv_ml:g} mL")
            if extra:
                text += f" {', '.join(extra)}."
            if h.symptoms:
                text += f" Symptoms and ECG: {h.symptoms}"
        out.append(text)
    return out


def stage_wall_motion(analysis: Analysis, stage: Stage) -> str:
    scores = {s.number: s.wall_motion[stage] for s in analysis.segments}
    seen = [n for n, v in scores.items() if v is not None]
    unseen = [n for n, v in scores.items() if v is None]
    total = len(scores)
    if not seen:  # a draft's empty stage, or every segment "x": never claim all were unseen
        return "wall motion not scored yet (no segment has a score)."
    wmsi = analysis.wmsi.get(stage)
    wmsi_text = f"WMSI {wmsi:.2f}" if wmsi is not None else "WMSI not computed"
    abnormal = {n: v for n, v in scores.items() if v is not None and v > 1}
    unseen_text = f" Not visualised: {segments_phrase(unseen)}." if unseen else ""
    if not abnormal:
        where = f"all {total} segments" if not unseen else f"the {len(seen)} segments visualised"
        return f"normal wall motion in {where} ({wmsi_text}).{unseen_text}"
    by_number = {s.number: s for s in analysis.segments}
    parts = []
    for score in sorted(set(abnormal.values())):
        segs = [by_number[n] for n, v in abnormal.items() if v == score]
        parts.append(f"{sentence_case(WALL_MOTION_WORDS[score])}: {named_segments(segs)}.")
    rest = "Other segments normal." if len(abnormal) + len(unseen) < total else ""
    return " ".join(filter(None, [f"{wmsi_text}.", *parts, rest])) + unseen_text


def perfusion_paragraphs(analysis: Analysis) -> list[str]:
    p = analysis.perfusion
    if not p.scored:
        return []
    out = []
    if analysis.contrast_agent:
        out.append(f"Enhancing agent: {analysis.contrast_agent}.")
    for stage in analysis.stages:
        if stage not in analysis.segments[0].perfusion:
            continue
        scores = {s.number: s.perfusion[stage] for s in analysis.segments}
        seen = [n for n, v in scores.items() if v is not None]
        unseen = [n for n, v in scores.items() if v is None]
        reduced = [n for n, v in scores.items() if v == 2]
        absent = [n for n, v in scores.items() if v == 3]
        label = sentence_case(stage_words(stage, analysis.protocol))
        if not seen:
            out.append(f"{label}: perfusion not scored yet (no segment has a score).")
            continue
        parts = []
        if not reduced and not absent:
            parts.append(
                f"normal perfusion in {'all ' + str(len(scores)) if not unseen else 'the ' + str(len(seen))} segments {'scored' if unseen else ''}".rstrip()
            )
        if reduced:
            parts.append(f"reduced or delayed in {segments_phrase(reduced)}")
        if absent:
            parts.append(f"absent in {segments_phrase(absent)}")
        if unseen:
            parts.append(f"{segments_phrase(unseen)} not visualised")
        extent = p.defect_extent_percent.get(stage)
        if extent is not None:
            parts.append(f"defect extent {extent:.0f} %")
        out.append(f"{label}: {'; '.join(parts)}.")
    categories = [
        (p.reversible_segments, "Reversible defects (inducible ischaemia)"),
        (
            p.partially_reversible_segments,
            "Partially reversible defects (scar with inducible ischaemia)",
        ),
        (p.fixed_segments, "Fixed defects (infarct pattern)"),
    ]
    better = [
        s.number
        for s in analysis.segments
        if s.perfusion_response is PerfusionResponse.BETTER_AT_STRESS
    ]
    territory_of = {s.number: s.territory.value for s in analysis.segments}
    found = False
    for members, label in categories:
        if members:
            found = True
            where = numbers(dict.fromkeys(territory_of[n] for n in members))
            out.append(f"{label}: {segments_phrase(members)} ({where}).")
    if better:
        found = True
        out.append(
            f"Better at stress than at rest: {segments_phrase(better)}; review the rest images for artefact."
        )
    if not found:
        out.append("No reversible or fixed perfusion defect.")
    return out


def kinetics_paragraphs(analysis: Analysis, cite: bool = True, checks: bool = True) -> list[str]:
    """Fitted replenishment: reserve per territory, low segments, visual cross-checks.

    Without ``cite`` the fitted formula is left to the curve caption and the Methods line; without
    ``checks`` the fit-quality cross-checks (reader notes) are left out.
    """
    k = analysis.kinetics
    if k is None:
        return []
    model = f" to {k.model}" if cite else ""
    out = [f"{k.fits_ok} of {k.fits_total} curves fitted well{model}."]
    for territory in Territory:
        t = k.territory_reserve.get(territory)
        if t is None or not t.count or t.A_beta_reserve is None:
            out.append(f"{territory.value}: no segment with good fits at rest and stress.")
            continue
        text = f"{territory.value}: A·β (flow) reserve {t.A_beta_reserve:.2f}"
        if t.beta_reserve is not None:
            text += f", β reserve {t.beta_reserve:.2f}"
        text += f" from {t.count} segment{'s' if t.count != 1 else ''}"
        below = [RESERVE_FLAG_WORDS[f] for f in t.flags if f in RESERVE_FLAG_WORDS]
        cut = "the cut-off" if len(below) == 1 else "their cut-offs"
        out.append(text + (f"; {' and '.join(below)} below {cut}." if below else "."))
    low = [r.number for r in k.reserve if ReserveFlag.LOW_A_BETA_RESERVE in r.flags]
    if low:
        out.append(f"Segment A·β reserve below the cut-off in {segments_phrase(low)}.")
    if checks:
        out += [c.text for c in k.cross_checks]
    return out
