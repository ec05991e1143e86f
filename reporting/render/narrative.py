"""The written report: findings, impression by territory, stress adequacy, perfusion and notes.

All wording is decided here, in Python, into a small typed context (:class:`Narrative`: sections of
ready-made paragraphs); the jinja2 templates in ``templates/`` only substitute and loop. A lab may
point at its own template folder; its files override the packaged ones of the same name.

The plain-text form (:func:`narrative_text`) has one block per section, blocks separated by a blank
line, the first line of a block being its heading and every further line one paragraph. The PDF
reads that form, so a lab template changes the PDF too.

Wording rules: a study without ischaemia below the target heart rate is called non-diagnostic for
ischaemia, never normal (Ballal RS et al., 1997); akinesis turning dyskinetic is reported on its own
and never as ischaemia (Elhendy A et al., Chest 1996; Sozzi FB et al., JASE 2007); extent follows
Kataoka A et al., Cardiovasc Ultrasound 2015;13:47 (mild 1–2, moderate–severe ≥ 3 segments).
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from functools import cache
from pathlib import Path

import jinja2

from reporting.errors import InputError
from reporting.kinetics.models import ReserveFlag
from reporting.model import Protocol, Stage
from reporting.results import Analysis, DiagnosticStatus, FindingCode, SegmentResult
from reporting.scoring import IschemiaExtent, PerfusionResponse, WallMotionResponse
from reporting.segments import Territory
from reporting.settings import HeartRateFormula

TEXT_TEMPLATE = "narrative.txt.j2"
HTML_TEMPLATE = "narrative.html.j2"


@dataclass(frozen=True)
class Section:
    """One section of the narrative: a heading and its paragraphs (plain text)."""

    key: str
    heading: str
    paragraphs: tuple[str, ...]


@dataclass(frozen=True)
class Narrative:
    """Everything the templates fill in."""

    study_id: str
    summary: str
    sections: tuple[Section, ...]


# --- template environment ---------------------------------------------------------------------


def _autoescape(name: str | None) -> bool:
    return name is not None and name.endswith((".html.j2", ".html", ".htm"))


@cache
def environment(templates_dir: str | None = None) -> jinja2.Environment:
    """The jinja2 environment; a lab folder, when given, is searched before the packaged one."""
    loaders: list[jinja2.BaseLoader] = []
    if templates_dir is not None:
        loaders.append(jinja2.FileSystemLoader(templates_dir))
    loaders.append(jinja2.PackageLoader("reporting.render", "templates"))
    return jinja2.Environment(
        loader=jinja2.ChoiceLoader(loaders),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        autoescape=_autoescape,
        keep_trailing_newline=True,
    )


def _render(name: str, narrative: Narrative, templates_dir: Path | str | None) -> str:
    env = environment(str(templates_dir) if templates_dir is not None else None)
    try:
        return env.get_template(name).render(
            study_id=narrative.study_id, summary=narrative.summary, sections=narrative.sections
        )
    except jinja2.TemplateError as exc:
        where = f"template {name}" + (f" in {templates_dir}" if templates_dir is not None else "")
        line = getattr(exc, "lineno", None)
        raise InputError(where + (f", line {line}" if line else ""), str(exc)) from None


def narrative_text(
    analysis: Analysis,
    templates_dir: Path | str | None = None,
    *,
    include_cautions: bool = True,
) -> str:
    """The narrative as plain text (blocks of heading + paragraphs, one blank line between)."""
    text = _render(TEXT_TEMPLATE, build_narrative(analysis, include_cautions), templates_dir)
    lines = [line.rstrip() for line in text.strip("\n").splitlines()]
    return "\n".join(lines) + "\n"


def narrative_html(
    analysis: Analysis,
    templates_dir: Path | str | None = None,
    *,
    include_cautions: bool = True,
) -> str:
    """The narrative as an HTML fragment (user text escaped by the environment)."""
    return _render(HTML_TEMPLATE, build_narrative(analysis, include_cautions), templates_dir)


def text_blocks(text: str) -> list[tuple[str, list[str]]]:
    """Split plain narrative text into (heading, paragraphs) blocks."""
    blocks: list[tuple[str, list[str]]] = []
    for chunk in text.strip().split("\n\n"):
        lines = [line.strip() for line in chunk.splitlines() if line.strip()]
        if lines:
            blocks.append((lines[0], lines[1:]))
    return blocks


# --- wording ----------------------------------------------------------------------------------

STAGE_WORDS = {
    Stage.REST: "Rest",
    Stage.LOW_DOSE: "Low dose",
    Stage.PEAK: "Peak",
    Stage.RECOVERY: "Recovery",
}
WALL_MOTION_WORDS = {2: "Hypokinetic", 3: "Akinetic", 4: "Dyskinetic", 5: "Aneurysmal"}
WORST_WORDS = {2: "hypokinetic", 3: "akinetic", 4: "dyskinetic", 5: "aneurysmal"}
EXTENT_WORDS = {
    IschemiaExtent.MILD: "mild extent",
    IschemiaExtent.MODERATE_SEVERE: "moderate–severe extent",
}
FINDING_LABELS = {
    FindingCode.LOW_THRESHOLD_ISCHEMIA: "Ischaemia at a low threshold",
    FindingCode.EXTENSIVE_ISCHEMIA: "Extensive ischaemia",
    FindingCode.MULTIVESSEL_ISCHEMIA: "Multivessel pattern",
    FindingCode.LOW_RESTING_EF: "Low resting ejection fraction",
    FindingCode.HIGH_PEAK_WMSI: "High peak WMSI",
    FindingCode.ESV_RISE: "LV cavity dilation at stress",
    FindingCode.EF_FALL: "Fall in ejection fraction at stress",
    FindingCode.DUKE_HIGH_RISK: "High-risk Duke treadmill score",
}
PROTOCOL_WORDS = {
    Protocol.DOBUTAMINE: "Dobutamine stress echocardiography",
    Protocol.TREADMILL: "Treadmill exercise stress echocardiography",
    Protocol.BICYCLE: "Bicycle exercise stress echocardiography",
    Protocol.VASODILATOR: "Vasodilator stress echocardiography",
    Protocol.PACING: "Pacing stress echocardiography",
}
FORMULA_WORDS = {HeartRateFormula.FOX: "220 − age", HeartRateFormula.TANAKA: "208 − 0.7 × age"}


def numbers(values: Iterable[int | str]) -> str:
    """``1, 2 and 3``."""
    items = [str(v) for v in values]
    if len(items) <= 1:
        return "".join(items)
    return f"{', '.join(items[:-1])} and {items[-1]}"


def segments_phrase(values: Iterable[int]) -> str:
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
    return STAGE_WORDS[stage] + dose_words(analysis, stage)


def build_narrative(analysis: Analysis, include_cautions: bool = True) -> Narrative:
    """Decide every sentence of the narrative."""
    sections = [
        Section("impression", "Impression", tuple(impression(analysis))),
        Section("stress", "Stress and adequacy", tuple(stress_paragraphs(analysis))),
        Section("wall_motion", "Wall motion", tuple(wall_motion_paragraphs(analysis))),
        Section("perfusion", "Perfusion", tuple(perfusion_paragraphs(analysis))),
        Section("kinetics", "Replenishment kinetics", tuple(kinetics_paragraphs(analysis))),
        Section("high_risk", "High-risk findings", tuple(high_risk_paragraphs(analysis))),
        Section(
            "notes",
            "Image quality and protocol notes",
            tuple(n.text for n in analysis.notes),
        ),
        Section(
            "comments",
            "Reader's comments",
            tuple(analysis.study.comments.splitlines()) if analysis.study.comments else (),
        ),
    ]
    if include_cautions:
        sections.append(Section("cautions", "Cautions", tuple(analysis.cautions)))
    kept = tuple(s for s in sections if s.paragraphs)
    return Narrative(study_id=analysis.study.id, summary=summary(analysis), sections=kept)


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
            f"{s.peak_hr_percent_of_predicted:.0f} % of the age-predicted maximum; target {s.target_hr_bpm:.0f} bpm), "
            "so ischaemia is not excluded"
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
        worst_words = f", at worst {WORST_WORDS[worst]} at peak" if worst in WORST_WORDS else ""
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
        f"{value:.2f} at {STAGE_WORDS[stage].lower()}"
        for stage, value in t.wmsi.items()
        if stage in (Stage.REST, Stage.PEAK) and value is not None
    ]
    tail = f" Territory WMSI {', '.join(wmsi)}." if wmsi else ""
    return f"{territory.value} ({segments_phrase(t.segments)}): {'; '.join(parts)}.{tail}"


def stress_paragraphs(analysis: Analysis) -> list[str]:
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
            f"Peak heart rate {s.peak_hr_bpm} bpm, {s.peak_hr_percent_of_predicted:.0f} % of the age-predicted maximum "
            f"of {s.age_predicted_max_hr_bpm:.0f} bpm ({FORMULA_WORDS[s.heart_rate_formula]}); "
            f"the target of {s.target_hr_bpm:.0f} bpm ({100 * s.target_fraction:.0f} %) {verdict}."
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
            f"Duke treadmill score {signed(s.duke_treadmill_score)}: {s.duke_risk.value} risk (Mark DB et al., NEJM 1991)."
        )
    if s.mets is not None:
        paragraphs.append(f"Estimated workload {s.mets:g} METs.")
    if s.hr_recovery_1min_bpm is not None:
        paragraphs.append(
            f"Heart-rate recovery {signed(s.hr_recovery_1min_bpm)} bpm in the first minute after exercise"
            f"{HR_RECOVERY_WORDS[s.hr_recovery_abnormal]}."
        )
    return paragraphs


ANGINA_WORDS = {0: "no angina", 1: "non-limiting angina", 2: "exercise-limiting angina"}
# Cole CR et al., NEJM 1999;341:1351: a fall of 12 bpm or less in the first minute is abnormal (the
# cut-off is a lab setting, so the sentence names the verdict, not the number).
HR_RECOVERY_WORDS = {
    False: ": normal (Cole CR et al., NEJM 1999)",
    True: ": abnormal, at or below the cut-off (Cole CR et al., NEJM 1999)",
    None: "",
}


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
    return _sentence_case("; ".join(parts)) + "." if parts else ""


def _sentence_case(text: str) -> str:
    return text[:1].upper() + text[1:]


def signed(value: float) -> str:
    return f"−{abs(value):g}" if value < 0 else f"{value:g}"


def wall_motion_paragraphs(analysis: Analysis) -> list[str]:
    out = []
    for stage in analysis.stages:
        if stage not in analysis.segments[0].wall_motion:
            text = f"{stage_label(analysis, stage)}: wall motion not scored."
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
    if not seen:
        return f"no segment was visualised ({total} of {total} not visualised); wall motion cannot be assessed."
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
        parts.append(f"{WALL_MOTION_WORDS[score]}: {named_segments(segs)}.")
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
        label = STAGE_WORDS[stage]
        if not seen:
            out.append(f"{label}: perfusion not assessable (no segment visualised).")
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


def kinetics_paragraphs(analysis: Analysis) -> list[str]:
    """Fitted replenishment: reserve per territory, low segments, visual cross-checks."""
    k = analysis.kinetics
    if k is None:
        return []
    out = [f"{k.fits_ok} of {k.fits_total} curves fitted well to {k.model}."]
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
    out += [c.text for c in k.cross_checks]
    return out


RESERVE_FLAG_WORDS = {
    ReserveFlag.LOW_FLOW_RESERVE: "flow reserve",
    ReserveFlag.LOW_BETA_RESERVE: "β reserve",
}


def high_risk_paragraphs(analysis: Analysis) -> list[str]:
    findings = analysis.conclusion.high_risk_findings
    if not findings:
        return ["None identified."]
    return [f"{FINDING_LABELS[f.code]} — {_lower_first(f.detail)}" for f in findings]


def _lower_first(text: str) -> str:
    """Lower-case a leading capital unless it starts an abbreviation (``LV``, ``WMSI``)."""
    if len(text) > 1 and text[0].isupper() and text[1].islower():
        return text[0].lower() + text[1:]
    return text
