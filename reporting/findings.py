"""High-risk findings and image-quality or protocol notes, each tied to its published source.

High-risk criteria come from the noninvasive risk tables (ACC/AHA appropriate-use documents; Gibbons
RJ et al., 2002; Fihn SD et al., Circulation 2012, from memory), Yao SS et al., JACC 2003 (peak WMSI),
Turakhia MP et al., Eur Heart J 2009 (end-systolic volume), Mark DB et al., NEJM 1991 (Duke score) and
the ACC/AHA exercise testing guideline (exercise hypotension, from memory); the thresholds are fields of
:class:`~reporting.settings.Settings`, whose sources travel with each finding.
"""

from __future__ import annotations

from reporting import scoring, stress
from reporting.model import (
    EXERCISE_PROTOCOLS,
    STRESS_STAGES,
    Administration,
    Protocol,
    Stage,
    Study,
)
from reporting.results import (
    FindingCode,
    HighRiskFinding,
    Note,
    NoteKind,
    SegmentResult,
    StressResult,
)
from reporting.scoring import ISCHEMIC_RESPONSES, PerfusionResponse, WallMotionResponse
from reporting.segments import Territory, adjacency
from reporting.settings import Settings
from reporting.wording import and_list, number_list, sentence_case, stage_words


def high_risk_findings(
    study: Study,
    settings: Settings,
    segments: list[SegmentResult],
    ischemic_segments: list[int],
    multivessel_territories: list[Territory],
    reversible_percent: float,
    wmsi: dict[Stage, float],
    stress_result: StressResult,
) -> list[HighRiskFinding]:
    """Every high-risk finding the study shows, each with its evidence and source."""
    found: list[HighRiskFinding] = []

    def add(code: FindingCode, detail: str, setting: str) -> None:
        found.append(HighRiskFinding(code=code, detail=detail, source=settings.cited(setting)))

    low = _low_threshold(study, settings, segments)
    if low is not None:
        add(FindingCode.LOW_THRESHOLD_ISCHEMIA, low, "low_threshold_abnormal_segments_min")
    if len(ischemic_segments) >= settings.extensive_ischemia_segments_min:
        add(
            FindingCode.EXTENSIVE_ISCHEMIA,
            f"Ischaemia in {len(ischemic_segments)} segments: {number_list(ischemic_segments)}.",
            "extensive_ischemia_segments_min",
        )
    if len(multivessel_territories) >= settings.multivessel_territories_min:
        add(
            FindingCode.MULTIVESSEL_ISCHEMIA,
            f"Ischaemia in {len(multivessel_territories)} territories: {', '.join(multivessel_territories)}.",
            "multivessel_territories_min",
        )
    if reversible_percent >= settings.large_perfusion_defect_percent_min:
        add(
            FindingCode.LARGE_PERFUSION_DEFECT,
            f"Reversible perfusion defects in {reversible_percent:.1f} % of the myocardium.",
            "large_perfusion_defect_percent_min",
        )
    rest_data = study.stages.get(Stage.REST)
    peak_data = study.stages.get(Stage.PEAK)
    if (
        rest_data
        and rest_data.lvef_percent is not None
        and rest_data.lvef_percent < settings.resting_ef_high_risk_below_percent
    ):
        add(
            FindingCode.LOW_RESTING_EF,
            f"Resting LVEF {rest_data.lvef_percent:g} %.",
            "resting_ef_high_risk_below_percent",
        )
    if Stage.PEAK in wmsi and wmsi[Stage.PEAK] > settings.peak_wmsi_high_risk_above:
        add(
            FindingCode.HIGH_PEAK_WMSI,
            f"Peak WMSI {wmsi[Stage.PEAK]:.2f}.",
            "peak_wmsi_high_risk_above",
        )
    dilation = settings.lv_dilation_high_risk_esv_rise_above_ml
    rise = esv_rise_ml(study)
    if dilation is not None and rise is not None and rise > dilation:
        assert rest_data is not None and peak_data is not None
        add(
            FindingCode.LV_DILATION,
            f"LV end-systolic volume rose from {rest_data.lv_esv_ml:g} to {peak_data.lv_esv_ml:g} mL.",
            "lv_dilation_high_risk_esv_rise_above_ml",
        )
    ef_fall = _ef_fall(study, settings)
    if ef_fall is not None:
        add(FindingCode.EF_FALL, ef_fall[0], ef_fall[1])
    if (
        stress_result.duke_risk is stress.DukeRisk.HIGH
        and stress_result.duke_treadmill_score is not None
    ):
        add(
            FindingCode.DUKE_HIGH_RISK,
            f"Duke treadmill score {stress_result.duke_treadmill_score:g}.",
            "duke_high_risk_max",
        )
    if study.protocol in EXERCISE_PROTOCOLS:
        why = _pressure_fall(study, settings)
        if why is not None:
            add(
                FindingCode.HYPOTENSIVE_RESPONSE,
                sentence_case(why) + ".",
                "exercise_sbp_fall_high_risk_above_mmhg",
            )
    return found


def _low_threshold(study: Study, settings: Settings, segments: list[SegmentResult]) -> str | None:
    """Segments newly abnormal (or worsening) first at low dobutamine dose or low heart rate."""
    for stage in STRESS_STAGES:
        data = study.stages.get(stage)
        if data is None:
            continue
        low_dose = (
            stage is Stage.LOW_DOSE
            and study.protocol is Protocol.DOBUTAMINE
            and (
                data.dose_ug_kg_min is None
                or data.dose_ug_kg_min <= settings.dobutamine_low_dose_max_ug_kg_min
            )
        )
        low_rate = (
            data.heart_rate_bpm is not None and data.heart_rate_bpm < settings.low_heart_rate_bpm
        )
        if not (low_dose or low_rate):
            continue
        worse = [
            s.number
            for s in segments
            if s.response in ISCHEMIC_RESPONSES
            and s.ischemia_onset_stage in STRESS_STAGES[: STRESS_STAGES.index(stage) + 1]
        ]
        if len(worse) >= settings.low_threshold_abnormal_segments_min:
            when = []
            if data.dose_ug_kg_min is not None:
                when.append(f"dobutamine {data.dose_ug_kg_min:g} μg/kg/min")
            if data.heart_rate_bpm is not None:
                when.append(f"heart rate {data.heart_rate_bpm} bpm")
            context = f" ({', '.join(when)})" if when else ""
            return f"{len(worse)} segments newly abnormal or worse by {stage_words(stage, study.protocol)}{context}: {number_list(worse)}."
    return None


def esv_rise_ml(study: Study) -> float | None:
    """Rise of LV end-systolic volume from rest to peak (mL), when both were measured."""
    rest, peak = study.stages.get(Stage.REST), study.stages.get(Stage.PEAK)
    if rest is None or peak is None or rest.lv_esv_ml is None or peak.lv_esv_ml is None:
        return None
    return stress.settled(peak.lv_esv_ml - rest.lv_esv_ml)


def _ef_fall(study: Study, settings: Settings) -> tuple[str, str] | None:
    rest, peak = study.stages.get(Stage.REST), study.stages.get(Stage.PEAK)
    if peak is None or peak.lvef_percent is None:
        return None
    if rest is not None and rest.lvef_percent is not None:
        fall = stress.settled(rest.lvef_percent - peak.lvef_percent)
        if fall >= settings.ef_fall_high_risk_min_points:
            return (
                f"LVEF fell from {rest.lvef_percent:g} % to {peak.lvef_percent:g} % ({fall:g} points).",
                "ef_fall_high_risk_min_points",
            )
    if (
        study.protocol in EXERCISE_PROTOCOLS
        and peak.lvef_percent < settings.peak_exercise_ef_high_risk_below_percent
    ):
        return (
            f"Peak exercise LVEF {peak.lvef_percent:g} %.",
            "peak_exercise_ef_high_risk_below_percent",
        )
    return None


def _pressure_fall(study: Study, settings: Settings) -> str | None:
    """Why the systolic pressure response is hypotensive (rest → low stage → peak), if it is."""
    peak = study.stages.get(Stage.PEAK)
    if peak is None or peak.systolic_bp_mmhg is None:
        return None
    rest = study.stages.get(Stage.REST)
    during = [
        d.systolic_bp_mmhg
        for s, d in study.stages.items()
        if s in STRESS_STAGES and d.systolic_bp_mmhg is not None
    ]
    return stress.exercise_hypotension(
        rest.systolic_bp_mmhg if rest is not None else None,
        during,
        settings.exercise_sbp_fall_high_risk_above_mmhg,
    )


def response_notes(
    study: Study,
    settings: Settings,
    segments: list[SegmentResult],
    entry_errors: dict[int, tuple[Stage, ...]],
) -> list[Note]:
    """Notes on responses the reader must review and abnormal responses not graded as high risk."""
    notes: list[Note] = []
    at_low = [s.number for s in segments if s.response is WallMotionResponse.ABNORMAL_AT_LOW_DOSE]
    if at_low:
        notes.append(
            Note(
                kind=NoteKind.ABNORMAL_AT_LOW_DOSE,
                text=f"Segments {number_list(at_low)} were not seen at rest and were already abnormal at "
                "low dose: not called fixed, since the abnormality may be induced at low dose; review the images.",
                source="Baseline is the first stage that saw the segment (common practice)",
            )
        )
    for number, stages in sorted(entry_errors.items()):
        where = ", ".join(stage_words(s) for s in stages)
        notes.append(
            Note(
                kind=NoteKind.PROBABLE_ENTRY_ERROR,
                text=f"Segment {number} is scored aneurysmal at {where} but not at baseline: a segment "
                "does not become aneurysmal during stress, so this is probably an entry error; please confirm.",
                source="A segment turning aneurysmal only at stress is implausible (common practice)",
            )
        )
    dosed = study.protocol in EXERCISE_PROTOCOLS and [
        stage_words(stage, study.protocol)
        for stage, data in study.stages.items()
        if data.dose_ug_kg_min is not None or data.atropine_mg is not None
    ]
    if dosed:
        notes.append(
            Note(
                kind=NoteKind.PROBABLE_ENTRY_ERROR,
                text=f"A dobutamine dose or atropine is recorded at {and_list(dosed)} of a "
                f"{study.protocol.value} study: doses belong to dobutamine stress, so no rule uses "
                "them; please check the protocol.",
                source="Exercise studies have workload stages, not doses (common practice)",
            )
        )
    rise = esv_rise_ml(study)
    threshold = settings.lv_dilation_high_risk_esv_rise_above_ml
    if rise is not None and rise > 0 and (threshold is None or rise <= threshold):
        notes.append(
            Note(
                kind=NoteKind.LV_DILATION,
                text=f"LV end-systolic volume rose by {rise:g} mL from rest to peak: an abnormal "
                "response (cavity dilation), "
                + (
                    "not graded as a high-risk finding under this lab's settings."
                    if threshold is None
                    else f"within this lab's {threshold:g} mL allowance before it is graded as a "
                    "high-risk finding."
                ),
                source=settings.cited("lv_dilation_high_risk_esv_rise_above_ml"),
            )
        )
    if study.protocol is Protocol.DOBUTAMINE:
        why = _pressure_fall(study, settings)
        if why is not None:
            notes.append(
                Note(
                    kind=NoteKind.BLOOD_PRESSURE_FALL,
                    text=f"Under dobutamine, {why}: a fall in pressure is less specific with dobutamine "
                    "(vasodilation, outflow obstruction), so it is reported, not graded high risk.",
                    source=settings.cited("exercise_sbp_fall_high_risk_above_mmhg"),
                )
            )
    return notes


def quality_notes(
    study: Study,
    settings: Settings,
    segments: list[SegmentResult],
    wall: dict[Stage, dict[int, int | None]],
    perf: dict[Stage, dict[int, int | None]],
) -> list[Note]:
    """Notes on unseen segments, contrast use, imaging settings and viability."""
    notes: list[Note] = []
    touching = adjacency(study.segment_model)
    suggest_at: list[str] = []
    for stage, scores in wall.items():
        unseen = [n for n, score in scores.items() if score is None]
        if not unseen or len(unseen) == len(scores):
            continue  # a stage with no score at all is not scored yet (a draft), not unseen
        noun = "segments" if len(unseen) != 1 else "segment"
        notes.append(
            Note(
                kind=NoteKind.NOT_VISUALISED,
                text=f"Not visualised at {stage_words(stage, study.protocol)}: {noun} {number_list(unseen)}.",
                source=None,
            )
        )
        groups = scoring.connected_groups(unseen, touching)
        if groups and len(groups[0]) >= settings.contrast_suggest_contiguous_not_visualised_min:
            suggest_at.append(
                f"{stage_words(stage, study.protocol)} (segments {number_list(groups[0])})"
            )
    if suggest_at and study.contrast is None:
        notes.append(
            Note(
                kind=NoteKind.SUGGEST_CONTRAST,
                text="Contiguous segments were not visualised at "
                + "; ".join(suggest_at)
                + ": an ultrasound-enhancing agent is suggested for border definition.",
                source=settings.cited("contrast_suggest_contiguous_not_visualised_min"),
            )
        )
    if perf and study.contrast is None:
        notes.append(
            Note(
                kind=NoteKind.PERFUSION_WITHOUT_CONTRAST,
                text="Perfusion scores were entered but no enhancing agent is recorded; check the contrast details.",
                source=None,
            )
        )
    if (
        perf
        and study.contrast
        and study.contrast.imaging_mi is not None
        and study.contrast.imaging_mi > settings.low_mi_max
    ):
        notes.append(
            Note(
                kind=NoteKind.HIGH_MI_PERFUSION,
                text=f"Perfusion was imaged at mechanical index {study.contrast.imaging_mi:g}, above the low-MI range "
                f"(≤ {settings.low_mi_max:g}); microbubble destruction may mimic perfusion defects.",
                source=settings.cited("low_mi_max"),
            )
        )
    if (
        study.perfusion_curves
        and study.contrast
        and study.contrast.administration is Administration.BOLUS
    ):
        notes.append(
            Note(
                kind=NoteKind.BOLUS_QUANTIFICATION,
                text="Replenishment curves were acquired with bolus injection; quantification assumes the steady "
                "state of a continuous infusion, so the fitted values are unreliable.",
                source="Wei K et al., Circulation 1998;97:473 (model requires constant infusion) [C]",
            )
        )
    worsening = [
        s.number for s in segments if s.perfusion_response is PerfusionResponse.PARTIALLY_REVERSIBLE
    ]
    if worsening:
        notes.append(
            Note(
                kind=NoteKind.WORSENING_DEFECT,
                text=f"Perfusion defects present at rest worsened at peak in segments {number_list(worsening)}: "
                "possible ischaemia beside a scar; not counted as reversible defects; review the images.",
                source=None,
            )
        )
    biphasic = [s.number for s in segments if s.response is WallMotionResponse.BIPHASIC]
    if len(biphasic) >= settings.viability_biphasic_segments_min:
        notes.append(
            Note(
                kind=NoteKind.VIABILITY,
                text=f"{len(biphasic)} segments show a biphasic response (segments {number_list(biphasic)}); "
                "recovery of global function after revascularisation is likely.",
                source=settings.cited("viability_biphasic_segments_min"),
            )
        )
    return notes
