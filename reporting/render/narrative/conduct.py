"""How the test was run and what the reader wrote: the "Test conduct" section (baseline rhythm and
ECG, medications, vasodilator agent and dose, why stress stopped, complications, arrhythmias, image
quality per stage), the heart-rate recovery verdict, and the reader's own impression,
recommendations and other echo findings, printed as written.

Heart-rate recovery: ≤ 18 bpm in the first minute is abnormal in stress echo, where the patient lies
down at once (Watanabe J et al., Circulation 2001;104:1911); the cut-off is a lab setting, so the
sentence prints the cut-off the record used and names the source only for the published default.
"""

from __future__ import annotations

from reporting.model import EXERCISE_PROTOCOLS
from reporting.procedure import (
    Arrhythmia,
    BaselineEcg,
    BaselineRhythm,
    Complication,
    ImageQuality,
    MedicationUse,
    StopReason,
    VasodilatorAgent,
)
from reporting.render.narrative.words import sentence_case
from reporting.results import Analysis, MedicationSummary, StressResult, VasodilatorSummary
from reporting.wording import stage_words

RHYTHM_WORDS = {
    BaselineRhythm.SINUS: "sinus rhythm",
    BaselineRhythm.ATRIAL_FIBRILLATION: "atrial fibrillation",
    BaselineRhythm.ATRIAL_FLUTTER: "atrial flutter",
    BaselineRhythm.PACED: "paced rhythm",
    BaselineRhythm.OTHER: "another rhythm",
}
ECG_WORDS = {
    BaselineEcg.NORMAL: "no abnormality",
    BaselineEcg.LEFT_BUNDLE_BRANCH_BLOCK: "left bundle branch block",
    BaselineEcg.RIGHT_BUNDLE_BRANCH_BLOCK: "right bundle branch block",
    BaselineEcg.VENTRICULAR_PACING: "ventricular pacing",
    BaselineEcg.PRE_EXCITATION: "pre-excitation",
    BaselineEcg.LV_HYPERTROPHY: "LV hypertrophy with repolarisation changes",
    BaselineEcg.RESTING_ST_DEPRESSION: "ST depression at rest",
    BaselineEcg.Q_WAVES: "pathological Q waves",
    BaselineEcg.OTHER: "other findings",
}
MEDICATION_NAMES = {
    "beta_blocker": "beta-blocker",
    "rate_limiting_calcium_channel_blocker": "rate-limiting calcium-channel blocker",
    "nitrate": "nitrate",
}
USE_WORDS = {
    MedicationUse.NOT_PRESCRIBED: "not prescribed",
    MedicationUse.TAKEN: "taken before the test",
    MedicationUse.WITHHELD: "withheld before the test",
}
STOP_WORDS = {
    StopReason.TARGET_HEART_RATE: "target heart rate reached",
    StopReason.PROTOCOL_COMPLETE: "protocol completed",
    StopReason.FATIGUE: "fatigue",
    StopReason.DYSPNOEA: "breathlessness",
    StopReason.ANGINA: "angina",
    StopReason.NEW_WALL_MOTION_ABNORMALITY: "new wall-motion abnormality",
    StopReason.ST_CHANGE: "ST-segment change",
    StopReason.HYPERTENSION: "hypertensive response",
    StopReason.HYPOTENSION: "fall in blood pressure",
    StopReason.ARRHYTHMIA: "arrhythmia",
    StopReason.SIDE_EFFECTS: "side effects of the stress agent",
    StopReason.PATIENT_REQUEST: "patient request",
    StopReason.OTHER: "other reason",
}
COMPLICATION_WORDS = {
    Complication.NONE: "none",
    Complication.SYMPTOMATIC_HYPOTENSION: "symptomatic hypotension",
    Complication.SEVERE_HYPERTENSION: "severe hypertension",
    Complication.PROLONGED_ANGINA: "prolonged angina",
    Complication.BRONCHOSPASM: "bronchospasm",
    Complication.SYNCOPE: "syncope or presyncope",
    Complication.ALLERGIC_REACTION: "allergic reaction",
    Complication.OTHER: "other complication",
}
ARRHYTHMIA_WORDS = {
    Arrhythmia.NONE: "none",
    Arrhythmia.ATRIAL_ECTOPY: "atrial ectopic beats",
    Arrhythmia.VENTRICULAR_ECTOPY: "ventricular ectopic beats",
    Arrhythmia.NON_SUSTAINED_VT: "non-sustained ventricular tachycardia",
    Arrhythmia.SUSTAINED_VT: "sustained ventricular tachycardia",
    Arrhythmia.VENTRICULAR_FIBRILLATION: "ventricular fibrillation",
    Arrhythmia.ATRIAL_FIBRILLATION: "new atrial fibrillation or flutter",
    Arrhythmia.SUPRAVENTRICULAR_TACHYCARDIA: "supraventricular tachycardia",
    Arrhythmia.AV_BLOCK: "atrioventricular block",
    Arrhythmia.OTHER: "other arrhythmia",
}
AGENT_WORDS = {
    VasodilatorAgent.ADENOSINE: "adenosine",
    VasodilatorAgent.REGADENOSON: "regadenoson",
    VasodilatorAgent.DIPYRIDAMOLE: "dipyridamole",
}
QUALITY_WORDS = {
    ImageQuality.GOOD: "good",
    ImageQuality.ADEQUATE: "adequate",
    ImageQuality.POOR: "poor",
}
WATANABE = "Watanabe J et al., Circulation 2001"
LAB_SETTING_PREFIX = "Lab setting"  # how Settings.cited marks a lab's own value


def conduct_paragraphs(analysis: Analysis) -> list[str]:
    """One sentence per recorded aspect of how the test was run; none when nothing was recorded."""
    p = analysis.procedure
    out = []
    if p.baseline_rhythm is not None or p.baseline_ecg:
        parts = [RHYTHM_WORDS[p.baseline_rhythm]] if p.baseline_rhythm is not None else []
        parts += [ECG_WORDS[e] for e in p.baseline_ecg]
        out.append(f"Resting ECG: {', '.join(parts)}.")
    if p.medications is not None:
        text = medication_sentence(p.medications)
        if text:
            out.append(text)
    if p.vasodilator is not None:
        out.append(vasodilator_sentence(p.vasodilator))
    if p.stop_reasons:
        what = "Exercise" if analysis.protocol in EXERCISE_PROTOCOLS else "Stress"
        out.append(f"{what} stopped for: {', '.join(STOP_WORDS[r] for r in p.stop_reasons)}.")
    if p.complications:
        out.append(f"Complications: {', '.join(COMPLICATION_WORDS[c] for c in p.complications)}.")
    if p.arrhythmias:
        out.append(f"Arrhythmias: {', '.join(ARRHYTHMIA_WORDS[a] for a in p.arrhythmias)}.")
    if p.image_quality:
        stages = [
            f"{QUALITY_WORDS[q]} at {stage_words(s, analysis.protocol)}"
            for s in analysis.stages
            if (q := p.image_quality.get(s)) is not None
        ]
        out.append(f"Image quality: {', '.join(stages)}.")
    return out


def medication_sentence(m: MedicationSummary) -> str:
    """``Beta-blocker withheld before the test; nitrate not prescribed.``"""
    parts = [
        f"{MEDICATION_NAMES[name]} {USE_WORDS[use]}"
        for name in MEDICATION_NAMES
        if (use := getattr(m, name)) is not None
    ]
    return sentence_case("; ".join(parts)) + "." if parts else ""


def vasodilator_sentence(v: VasodilatorSummary) -> str:
    """``Vasodilator: regadenoson 0.4 mg.``"""
    dose = next(
        (
            f" {value:g} {unit}"
            for value, unit in (
                (v.dose_ug_kg_min, "μg/kg/min"),
                (v.dose_mg, "mg"),
                (v.dose_mg_kg, "mg/kg"),
            )
            if value is not None
        ),
        "",
    )
    return f"Vasodilator: {AGENT_WORDS[v.agent]}{dose}."


def hr_recovery_verdict(s: StressResult, cite: bool = True) -> str:
    """``: abnormal, at or below the stress-echo cut-off of 18 bpm (Watanabe J et al., Circulation 2001)``."""
    if s.hr_recovery_abnormal is None:
        return ""
    cut = s.hr_recovery_abnormal_max_bpm
    if cut is None:  # a record written before the cut-off was kept
        return ": abnormal" if s.hr_recovery_abnormal else ": normal"
    lab = s.hr_recovery_source is not None and s.hr_recovery_source.startswith(LAB_SETTING_PREFIX)
    source = " (lab setting)" if lab else f" ({WATANABE})"
    if not cite:
        source = ""
    if s.hr_recovery_abnormal:
        return f": abnormal, at or below the cut-off of {cut:g} bpm{source}"
    return f": normal, above the cut-off of {cut:g} bpm{source}"


def reader_paragraphs(text: str | None) -> tuple[str, ...]:
    """The reader's own text, one paragraph per non-blank line, as written."""
    return tuple(line.strip() for line in (text or "").splitlines() if line.strip())
