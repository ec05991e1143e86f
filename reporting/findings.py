"""High-risk findings and image-quality or protocol notes, each tied to its published source.

High-risk criteria come from the noninvasive risk table of the ACC/AHA appropriate-use documents,
Yao SS et al., JACC 2003 (peak WMSI), Turakhia MP et al., Eur Heart J 2009 (end-systolic volume) and
Mark DB et al., NEJM 1991 (Duke score); the thresholds are fields of
:class:`~reporting.settings.Settings`, whose sources travel with each finding.
"""

from __future__ import annotations

from reporting import scoring, stress
from reporting.model import STRESS_STAGES, Administration, Protocol, Stage, Study
from reporting.results import (
    FindingCode,
    HighRiskFinding,
    Note,
    NoteKind,
    SegmentResult,
    StressResult,
)
from reporting.scoring import PerfusionResponse, WallMotionResponse
from reporting.segments import Territory, adjacency
from reporting.settings import Settings
from reporting.wording import number_list, stage_words


def high_risk_findings(
    study: Study,
    settings: Settings,
    wm_ischemic: list[int],
    ischemic_territories: list[Territory],
    wall: dict[Stage, dict[int, int | None]],
    wmsi: dict[Stage, float],
    stress_result: StressResult,
) -> list[HighRiskFinding]:
    """Every high-risk finding the study shows, each with its evidence and source."""
    found: list[HighRiskFinding] = []

    def add(code: FindingCode, detail: str, setting: str) -> None:
        found.append(HighRiskFinding(code=code, detail=detail, source=settings.cited(setting)))

    rest = wall.get(Stage.REST)
    if rest is not None:
        for stage in STRESS_STAGES:
            if stage not in wall:
                continue
            data = study.stages[stage]
            low_dose = (
                stage is Stage.LOW_DOSE
                and study.protocol is Protocol.DOBUTAMINE
                and (
                    data.dose_ug_kg_min is None
                    or data.dose_ug_kg_min <= settings.dobutamine_low_dose_max_ug_kg_min
                )
            )
            low_rate = (
                data.heart_rate_bpm is not None
                and data.heart_rate_bpm < settings.low_heart_rate_bpm
            )
            worse = scoring.newly_abnormal(rest, wall[stage])
            if (low_dose or low_rate) and len(
                worse
            ) >= settings.low_threshold_abnormal_segments_min:
                when = []
                if data.dose_ug_kg_min is not None:
                    when.append(f"dobutamine {data.dose_ug_kg_min:g} μg/kg/min")
                if data.heart_rate_bpm is not None:
                    when.append(f"heart rate {data.heart_rate_bpm} bpm")
                context = f" ({', '.join(when)})" if when else ""
                add(
                    FindingCode.LOW_THRESHOLD_ISCHEMIA,
                    f"{len(worse)} segments newly abnormal at {stage_words(stage, study.protocol)}{context}: {number_list(worse)}.",
                    "low_threshold_abnormal_segments_min",
                )
                break
    if len(wm_ischemic) >= settings.extensive_ischemia_segments_min:
        add(
            FindingCode.EXTENSIVE_ISCHEMIA,
            f"Ischaemia in {len(wm_ischemic)} segments: {number_list(wm_ischemic)}.",
            "extensive_ischemia_segments_min",
        )
    if len(ischemic_territories) >= settings.multivessel_territories_min:
        add(
            FindingCode.MULTIVESSEL_ISCHEMIA,
            f"Ischaemia in {len(ischemic_territories)} territories: {', '.join(ischemic_territories)}.",
            "multivessel_territories_min",
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
    if rest_data and peak_data:
        if rest_data.lv_esv_ml is not None and peak_data.lv_esv_ml is not None:
            rise = peak_data.lv_esv_ml - rest_data.lv_esv_ml
            if rise > settings.esv_rise_high_risk_above_ml:
                add(
                    FindingCode.ESV_RISE,
                    f"LV end-systolic volume rose from {rest_data.lv_esv_ml:g} to {peak_data.lv_esv_ml:g} mL.",
                    "esv_rise_high_risk_above_ml",
                )
        if rest_data.lvef_percent is not None and peak_data.lvef_percent is not None:
            fall = rest_data.lvef_percent - peak_data.lvef_percent
            if fall > settings.ef_fall_high_risk_above_percent:
                add(
                    FindingCode.EF_FALL,
                    f"LVEF fell from {rest_data.lvef_percent:g} % to {peak_data.lvef_percent:g} %.",
                    "ef_fall_high_risk_above_percent",
                )
    if (
        stress_result.duke_risk is stress.DukeRisk.HIGH
        and stress_result.duke_treadmill_score is not None
    ):
        add(
            FindingCode.DUKE_HIGH_RISK,
            f"Duke treadmill score {stress_result.duke_treadmill_score:g}.",
            "duke_high_risk_max",
        )
    return found


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
        if not unseen:
            continue
        notes.append(
            Note(
                kind=NoteKind.NOT_VISUALISED,
                text=f"Not visualised at {stage_words(stage, study.protocol)}: segments {number_list(unseen)}.",
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
