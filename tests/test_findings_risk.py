"""Second-round clinical rules end to end (issue 12): recovery, baseline, territory status, study
status, wrap-around LAD, perfusion-only ischaemia, entry errors, high-risk findings and risk bands.

Every case is worked by hand and written out as a table; the source of each rule stands beside it.
Wall-motion strings hold one score per segment in number order (17-segment model, Cerqueira MD et
al., Circulation 2002;105:539: LAD 1,2,7,8,13,14,17; RCA 3,4,9,10,15; LCx 5,6,11,12,16).
"""

from __future__ import annotations

import io
from fractions import Fraction
from typing import Any

import pytest
from conftest import NORMAL_17, analysed, stages, study_dict
from pypdf import PdfReader

from reporting.analysis import analyze
from reporting.load import study_from_data
from reporting.model import Stage
from reporting.render import pdf_bytes
from reporting.render.narrative import narrative_text
from reporting.results import (
    DiagnosticStatus,
    FindingCode,
    NonDiagnosticReason,
    NoteKind,
    RiskLevel,
    TerritoryStatus,
)
from reporting.scoring import IschemiaExtent, WallMotionResponse
from reporting.segments import Territory
from reporting.settings import Settings, default_settings

LAD, LCX, RCA = Territory.LAD, Territory.LCX, Territory.RCA
ISCH, NO, ND = TerritoryStatus.ISCHEMIA, TerritoryStatus.NO_ISCHEMIA, TerritoryStatus.NON_DIAGNOSTIC


def _codes(**changes: Any) -> set[FindingCode]:
    return {f.code for f in analysed(**changes).conclusion.high_risk_findings}


# --- recovery is ischaemia ---------------------------------------------------------------------


def test_new_abnormality_seen_only_in_recovery_is_ischaemia() -> None:
    # Marwick TH, Heart 2003;89:113, table 1: peak/post-stress judged against rest; Karagiannis SE
    # et al., Coron Artery Dis 2007;18:187: post-exercise images are the peak images.
    # Segments 3 and 4 (RCA) normal at rest and peak, hypokinetic in recovery.
    a = analysed(stages=stages(rest=NORMAL_17, peak=NORMAL_17, recovery="112211 111111 1111 1"))
    by = {s.number: s for s in a.segments}
    assert [by[3].response, by[4].response] == [WallMotionResponse.ISCHEMIC] * 2
    assert by[3].ischemia_onset_stage is Stage.RECOVERY
    assert a.territories[RCA].status is ISCH
    assert a.territories[RCA].ischemic_segments == [3, 4]
    assert (a.conclusion.status, a.conclusion.ischemic_territories) == (
        DiagnosticStatus.ISCHEMIA,
        [RCA],
    )
    text = narrative_text(a)
    assert "seen in recovery (after stress) in segments 3 and 4, at worst hypokinetic" in text


# --- territory and study status ---------------------------------------------------------------

# Territory not assessable (common practice): no segment of it seen at baseline and at stress.
# Study status: ischemia if any; else non-diagnostic for no stress images, an unread territory or
# inadequate stress (Ballal RS et al., 1997; not for vasodilator stress); else no ischaemia.
#   stages, protocol -> (LAD, LCx, RCA) status, study status, reason
STATUS_CASES = [
    (
        {"rest": NORMAL_17, "peak": NORMAL_17},
        "dobutamine",
        (NO, NO, NO),
        DiagnosticStatus.NO_ISCHEMIA,
        None,
        "negative",
    ),
    (
        # RCA 3, 4, 9, 10, 15 unseen at peak (no recovery): the RCA is unread.
        {"rest": NORMAL_17, "peak": "11xx11 11xx11 11x1 1"},
        "dobutamine",
        (NO, NO, ND),
        DiagnosticStatus.NON_DIAGNOSTIC,
        NonDiagnosticReason.TERRITORY_NOT_ASSESSABLE,
        "one territory unread",
    ),
    (
        # Same, but recovery saw the RCA: it is read.
        {"rest": NORMAL_17, "peak": "11xx11 11xx11 11x1 1", "recovery": NORMAL_17},
        "dobutamine",
        (NO, NO, NO),
        DiagnosticStatus.NO_ISCHEMIA,
        None,
        "recovery reads the territory",
    ),
    (
        {"rest": NORMAL_17},
        "dobutamine",
        (ND, ND, ND),
        DiagnosticStatus.NON_DIAGNOSTIC,
        NonDiagnosticReason.NO_STRESS_IMAGES,
        "no stress stage",
    ),
    (
        # RCA unread but LAD ischaemic: ischaemia wins.
        {"rest": NORMAL_17, "peak": "11xx11 22xx11 11x1 1"},
        "dobutamine",
        (ISCH, NO, ND),
        DiagnosticStatus.ISCHEMIA,
        None,
        "ischaemia beside an unread territory",
    ),
]


@pytest.mark.parametrize(
    "scores,protocol,territories,status,reason",
    [c[:5] for c in STATUS_CASES],
    ids=[c[5] for c in STATUS_CASES],
)
def test_territory_and_study_status(
    scores: dict[str, str],
    protocol: str,
    territories: tuple[TerritoryStatus, ...],
    status: DiagnosticStatus,
    reason: NonDiagnosticReason | None,
) -> None:
    a = analysed(stages=stages(**scores), protocol=protocol)
    assert tuple(a.territories[t].status for t in (LAD, LCX, RCA)) == territories
    assert (a.conclusion.status, a.conclusion.non_diagnostic_reason) == (status, reason)


def test_no_stress_images_is_said_so_not_inadequate_stress() -> None:
    # A study with no stress stage says "no stress images" (issue 12), in record, narrative and PDF.
    a = analysed(stages=stages(rest=NORMAL_17))
    assert a.stress.adequacy_note == "No stress images were recorded."
    text = narrative_text(a)
    assert "Non-diagnostic for ischaemia: no stress images were recorded." in text
    assert "not adequate" not in text


def test_vasodilator_study_is_not_non_diagnostic_for_heart_rate() -> None:
    # Vasodilator stress is not rate-dependent, so a low peak heart rate does not make it
    # non-diagnostic (common practice; the target applies to dobutamine and exercise).
    s = stages(rest=NORMAL_17, peak=NORMAL_17)
    s["peak"]["heart_rate_bpm"] = 85
    assert analysed(stages=s, protocol="vasodilator").conclusion.status is (
        DiagnosticStatus.NO_ISCHEMIA
    )
    assert analysed(stages=s).conclusion.non_diagnostic_reason is (
        NonDiagnosticReason.STRESS_INADEQUATE
    )


# --- wrap-around LAD --------------------------------------------------------------------------

# Ortiz-Pérez JT et al., JACC Cardiovasc Imaging 2008;1:282 (wrap-around LAD); the counting rule is
# common practice: an RCA/LCx apical segment (15, 16) counts toward multivessel only when its
# territory also has basal or mid ischaemia, or the LAD has none.
#   peak scores -> multivessel, wrap-around segments, ischemic territories
WRAP_CASES = [
    ("111111 221111 2222 2", False, [15, 16], [LAD, LCX, RCA], "LAD with apical 15 and 16"),
    ("111111 221111 2221 2", False, [15], [LAD, RCA], "LAD with apical inferior 15"),
    ("112111 221111 2221 2", True, [], [LAD, RCA], "RCA also basal (3): multivessel"),
    ("111111 111111 1122 1", True, [], [LCX, RCA], "LAD has none: 15 and 16 count"),
    ("111111 221112 2211 2", True, [], [LAD, LCX], "LCx mid (12): multivessel"),
]


@pytest.mark.parametrize(
    "peak,multivessel,wrap,territories",
    [c[:4] for c in WRAP_CASES],
    ids=[c[4] for c in WRAP_CASES],
)
def test_wrap_around_lad(
    peak: str, multivessel: bool, wrap: list[int], territories: list[Territory]
) -> None:
    a = analysed(stages=stages(rest=NORMAL_17, peak=peak))
    c = a.conclusion
    assert (c.multivessel, c.wrap_around_segments, c.ischemic_territories) == (
        multivessel,
        wrap,
        territories,
    )
    assert (FindingCode.MULTIVESSEL_ISCHEMIA in {f.code for f in c.high_risk_findings}) is (
        multivessel
    )
    if wrap:
        assert "LAD, possibly wrapping around the apex" in narrative_text(a)
        assert "multivessel" not in narrative_text(a)


# --- perfusion-only ischaemia -----------------------------------------------------------------


def test_perfusion_only_ischaemia_counts_in_tables_extent_and_headline() -> None:
    # Reversible defect = normal at rest, abnormal at stress (Porter TR et al., JASE 2018;31:241,
    # from memory); extent counts wall motion and perfusion together (Kataoka A et al.,
    # Cardiovasc Ultrasound 2015;13:47: mild 1-2). Wall motion normal; perfusion 10 (RCA) reversible.
    s = stages(rest=NORMAL_17, peak=NORMAL_17)
    s["rest"]["perfusion"] = NORMAL_17
    s["peak"]["perfusion"] = "111111 111211 1111 1"
    a = analysed(stages=s, contrast={"administration": "infusion"})
    rca = a.territories[RCA]
    assert (rca.ischemic_segments, rca.ischemic_perfusion_segments, rca.status) == ([], [10], ISCH)
    c = a.conclusion
    assert (c.ischemia, c.ischemic_segments, c.ischemic_segment_count) == (True, [10], 0)
    assert c.ischemia_extent is IschemiaExtent.MILD  # never "none" beside ischemia true
    assert narrative_text(a).splitlines()[1] == (
        "Positive for inducible ischaemia in the RCA territory; limited ischaemia by reversible "
        "perfusion defects only: 1 segment. Intermediate risk: moderate reversible perfusion "
        "defect and limited inducible ischaemia."  # 1 of 17 segments = 5.9 % (5 to < 10 %)
    )


# --- entry errors and low-dose baselines ------------------------------------------------------


def test_stress_only_aneurysm_is_a_probable_entry_error() -> None:
    # A segment turning aneurysmal only at stress is implausible (common practice): a note, and
    # not akinesis turning dyskinetic. Segment 4 dyskinetic at rest, "5" at peak.
    s = stages(rest="111411 111111 1111 1", peak="111511 111111 1111 1")
    a = analysed(stages=s, wall_motion_scale=5)
    assert a.segments[3].response is WallMotionResponse.FIXED
    assert a.conclusion.akinetic_to_dyskinetic_segments == []
    notes = [n.text for n in a.notes if n.kind is NoteKind.PROBABLE_ENTRY_ERROR]
    assert notes == [
        "Segment 4 is scored aneurysmal at peak but not at baseline: a segment does not become "
        "aneurysmal during stress, so this is probably an entry error; please confirm."
    ]


@pytest.mark.parametrize(
    "protocol,noted",
    [("treadmill", True), ("bicycle", True), ("dobutamine", False)],
    ids=["treadmill", "bicycle", "dobutamine"],
)
def test_a_dose_in_an_exercise_study_is_a_probable_entry_error(protocol: str, noted: bool) -> None:
    # "Low dose" belongs to dobutamine only; exercise studies have workload stages (common
    # practice, FACTS: exercise terms). A dose there suggests a wrong protocol: a note, no rule.
    s = stages(rest=NORMAL_17, low_dose=NORMAL_17, peak=NORMAL_17)
    s["low_dose"]["dose_ug_kg_min"] = 10
    s["peak"]["atropine_mg"] = 0.5
    a = analysed(stages=s, protocol=protocol)
    notes = [n.text for n in a.notes if n.kind is NoteKind.PROBABLE_ENTRY_ERROR]
    if noted:
        (text,) = notes
        assert text.startswith("A dobutamine dose or atropine is recorded at low workload and peak")
        assert "please check the protocol" in text
    else:
        assert notes == []


def test_abnormal_at_low_dose_baseline_is_flagged_not_fixed() -> None:
    # Baseline when rest is not seen (common practice): segment 1 unseen at rest, hypokinetic at low
    # dose and peak: not fixed, flagged for review.
    s = stages(
        rest="x11111 111111 1111 1", low_dose="211111 111111 1111 1", peak="211111 111111 1111 1"
    )
    a = analysed(stages=s)
    assert (a.segments[0].response, a.segments[0].baseline_stage) == (
        WallMotionResponse.ABNORMAL_AT_LOW_DOSE,
        Stage.LOW_DOSE,
    )
    assert a.conclusion.fixed_segments == []
    assert [n.kind for n in a.notes if n.kind is NoteKind.ABNORMAL_AT_LOW_DOSE] == [
        NoteKind.ABNORMAL_AT_LOW_DOSE
    ]


# --- high-risk findings -----------------------------------------------------------------------


def _exercise(protocol: str, rest_sbp: int, low_sbp: int | None, peak_sbp: int) -> dict[str, Any]:
    s = stages(rest=NORMAL_17, peak=NORMAL_17)
    s["rest"]["systolic_bp_mmhg"], s["peak"]["systolic_bp_mmhg"] = rest_sbp, peak_sbp
    if low_sbp is not None:  # stages in protocol order: rest, low dose, peak
        low = {"heart_rate_bpm": 125, "systolic_bp_mmhg": low_sbp}
        s = {"rest": s["rest"], "low_dose": low, "peak": s["peak"]}
    return {"stages": s, "protocol": protocol}


# Gibbons RJ et al., ACC/AHA exercise testing guideline update 2002 (from memory): exercise
# hypotension is high risk; with dobutamine a fall is reported, not graded (from memory).
#   protocol, rest, low stage, peak SBP -> hypotensive_response?, blood-pressure note?
PRESSURE_CASES = [
    ("treadmill", 130, None, 120, True, False, "treadmill peak below rest"),
    ("bicycle", 130, 175, 160, True, False, "bicycle fall of 15 from highest"),
    ("treadmill", 130, 170, 165, False, False, "fall of 5 only"),
    ("treadmill", 130, None, 150, False, False, "one exercise pressure above rest"),
    ("dobutamine", 130, 140, 110, False, True, "dobutamine fall: reported, not graded"),
]


@pytest.mark.parametrize(
    "protocol,rest,low,peak,graded,noted",
    [c[:6] for c in PRESSURE_CASES],
    ids=[c[6] for c in PRESSURE_CASES],
)
def test_blood_pressure_fall(
    protocol: str, rest: int, low: int | None, peak: int, graded: bool, noted: bool
) -> None:
    a = analysed(**_exercise(protocol, rest, low, peak))
    codes = {f.code for f in a.conclusion.high_risk_findings}
    assert (FindingCode.HYPOTENSIVE_RESPONSE in codes) is graded
    assert any(n.kind is NoteKind.BLOOD_PRESSURE_FALL for n in a.notes) is noted


# LVEF fall >= 10 points or peak exercise LVEF < 45 % (Fihn SD et al., Circulation 2012, from
# memory); a rise in end-systolic volume at stress is high risk (Turakhia MP et al., Eur Heart J
# 2009;30:2478; "any rise" as that study's definition, from memory).
#   protocol, rest EF, peak EF, rest ESV, peak ESV -> ef_fall?, lv_dilation?, dilation note?
LV_CASES = [
    ("dobutamine", 60, 50, 40, 40, True, False, False, "fall of 10 points"),
    ("dobutamine", 60, 52, 40, 40, False, False, False, "fall of 8 points"),
    ("dobutamine", 65.1, 55.1, 40, 40, True, False, False, "fall of exactly 10.0 points"),
    ("dobutamine", 65.1, 55.2, 40, 40, False, False, False, "fall of 9.9 points"),
    ("treadmill", 50, 44, 40, 40, True, False, False, "peak exercise EF 44 %"),
    ("dobutamine", 50, 44, 40, 40, False, False, False, "EF 44 % under dobutamine, fall of 6"),
    ("dobutamine", 60, 60, 40, 48, False, True, False, "ESV rise of 8 mL: graded"),
    ("dobutamine", 60, 60, 40.2, 40.3, False, True, False, "ESV rise of 0.1 mL: graded"),
    ("dobutamine", 60, 60, 40, 40, False, False, False, "ESV unchanged"),
    ("dobutamine", 60, 60, 40, 32, False, False, False, "ESV falls (the normal response)"),
]


@pytest.mark.parametrize(
    "protocol,ef_rest,ef_peak,esv_rest,esv_peak,ef_fall,dilation,noted",
    [c[:8] for c in LV_CASES],
    ids=[c[8] for c in LV_CASES],
)
def test_ef_fall_and_lv_dilation(
    protocol: str,
    ef_rest: float,
    ef_peak: float,
    esv_rest: float,
    esv_peak: float,
    ef_fall: bool,
    dilation: bool,
    noted: bool,
) -> None:
    s = stages(rest=NORMAL_17, peak=NORMAL_17)
    s["rest"].update(lvef_percent=ef_rest, lv_esv_ml=esv_rest)
    s["peak"].update(lvef_percent=ef_peak, lv_esv_ml=esv_peak)
    a = analysed(stages=s, protocol=protocol)
    codes = {f.code for f in a.conclusion.high_risk_findings}
    assert (FindingCode.EF_FALL in codes, FindingCode.LV_DILATION in codes) == (ef_fall, dilation)
    assert any(n.kind is NoteKind.LV_DILATION for n in a.notes) is noted


def _lab_esv(rest: float, peak: float, allowance: float | None) -> Any:
    s = stages(rest=NORMAL_17, peak=NORMAL_17)
    s["rest"]["lv_esv_ml"], s["peak"]["lv_esv_ml"] = rest, peak
    lab = Settings.model_validate(
        default_settings().model_dump() | {"lv_dilation_high_risk_esv_rise_above_ml": allowance}
    )
    return analyze(study_from_data(study_dict(stages=s)), settings=lab)


def test_lv_dilation_graded_above_a_lab_threshold() -> None:
    # A lab that sets a larger allowance gets the high-risk item above it, cited as its own
    # setting, and a note within it; 40.1 -> 45.1 mL is a rise of exactly 5 (binary arithmetic
    # says 5.000000000000007), within a 5 mL allowance.
    a = _lab_esv(40, 48, 5)
    found = [f for f in a.conclusion.high_risk_findings if f.code is FindingCode.LV_DILATION]
    assert len(found) == 1 and found[0].source.startswith(
        "Lab setting lv_dilation_high_risk_esv_rise_above_ml = 5.0 (published default 0.0: "
    )
    within = _lab_esv(40.1, 45.1, 5)
    assert FindingCode.LV_DILATION not in {f.code for f in within.conclusion.high_risk_findings}
    (note,) = [n for n in within.notes if n.kind is NoteKind.LV_DILATION]
    assert "rose by 5 mL" in note.text and "within this lab's 5 mL allowance" in note.text


def test_lv_dilation_not_graded_when_a_lab_turns_it_off() -> None:
    a = _lab_esv(40, 48, None)
    assert FindingCode.LV_DILATION not in {f.code for f in a.conclusion.high_risk_findings}
    (note,) = [n for n in a.notes if n.kind is NoteKind.LV_DILATION]
    assert "not graded as a high-risk finding under this lab's settings" in note.text


def test_ef_fall_at_ten_points_matches_exact_arithmetic() -> None:
    # Oracle: fractions.Fraction. Every one-decimal resting EF from 20.0 to 85.0 % with a peak EF
    # exactly 10 points lower is a fall ">= 10 points" (Fihn 2012, from memory); binary floating
    # point makes some of these differences 9.999999999999993.
    missed = []
    for tenths in range(200, 851):
        rest = tenths / 10
        peak = (tenths - 100) / 10
        assert Fraction(tenths, 10) - Fraction(tenths - 100, 10) == 10
        s = stages(rest=NORMAL_17, peak=NORMAL_17)
        s["rest"]["lvef_percent"], s["peak"]["lvef_percent"] = rest, peak
        a = analysed(stages=s)
        if FindingCode.EF_FALL not in {f.code for f in a.conclusion.high_risk_findings}:
            missed.append((rest, peak))
    assert missed == []


# Reversible defects >= 10 % of the myocardium (Fihn 2012, from memory; ESC 2013, Montalescot G et
# al., Eur Heart J 2013;34:2949: > 10 %); one segment = 100/17 = 5.9 %, two = 11.8 % (design choice).
#   reversible peak perfusion -> large?, risk
PERFUSION_RISK_CASES = [
    ("111111 111211 1111 1", False, RiskLevel.INTERMEDIATE, "one segment, 5.9 %"),
    ("111111 111221 1111 1", True, RiskLevel.HIGH, "two segments, 11.8 %"),
]


@pytest.mark.parametrize(
    "peak,large,risk",
    [c[:3] for c in PERFUSION_RISK_CASES],
    ids=[c[3] for c in PERFUSION_RISK_CASES],
)
def test_large_perfusion_defect(peak: str, large: bool, risk: RiskLevel) -> None:
    s = stages(rest=NORMAL_17, peak=NORMAL_17)
    s["rest"]["perfusion"], s["peak"]["perfusion"] = NORMAL_17, peak
    a = analysed(stages=s, contrast={"administration": "infusion"})
    codes = {f.code for f in a.conclusion.high_risk_findings}
    assert (FindingCode.LARGE_PERFUSION_DEFECT in codes) is large
    assert a.conclusion.risk is risk


def test_low_threshold_ischemia_counts_only_new_or_worsening_segments() -> None:
    # ACC/AHA noninvasive risk table: > 2 segments with a new or worsening abnormality at low dose
    # (<= 10 ug/kg/min) or heart rate < 120 bpm; old abnormalities present at rest do not count.
    # Rest: 1, 2, 7 akinetic (old). Low dose 10 ug/kg/min: 1, 2, 7 still akinetic, 13, 14 new.
    s = stages(
        rest="331111 311111 1111 1", low_dose="331111 311111 2211 1", peak="331111 311111 2211 1"
    )
    s["low_dose"]["dose_ug_kg_min"] = 10
    assert FindingCode.LOW_THRESHOLD_ISCHEMIA not in _codes(stages=s)
    s["low_dose"]["wall_motion"] = "331111 311111 2221 1"  # 13, 14, 15 new: three
    assert FindingCode.LOW_THRESHOLD_ISCHEMIA in _codes(stages=s)


# --- risk bands -------------------------------------------------------------------------------

# Noninvasive risk stratification table (Gibbons RJ et al., 2002 [C]; Fihn SD et al., Circulation
# 2012, from memory): high > 3 %/yr, intermediate 1-3 %/yr, low < 1 %/yr; not graded when
# non-diagnostic with no criterion met (issue 12).
#   stages changes, protocol -> risk, criteria codes
RISK_CASES = [
    ({}, "dobutamine", RiskLevel.LOW, [FindingCode.NO_INDUCIBLE_ISCHEMIA], "negative study"),
    (
        {"peak": "111111 221111 1111 1"},
        "dobutamine",
        RiskLevel.INTERMEDIATE,
        [FindingCode.LIMITED_ISCHEMIA],
        "ischaemia in 2 segments, one bed",
    ),
    (
        {"peak": "111111 221111 2111 1"},
        "dobutamine",
        RiskLevel.HIGH,
        [FindingCode.EXTENSIVE_ISCHEMIA],
        "ischaemia in 3 segments",
    ),
    (
        {"rest_ef": 40},
        "dobutamine",
        RiskLevel.INTERMEDIATE,
        [FindingCode.REDUCED_RESTING_EF],
        "resting LVEF 40 %",
    ),
    (
        {"peak_hr": 100},
        "dobutamine",
        RiskLevel.NOT_GRADED,
        [],
        "non-diagnostic, no criterion",
    ),
    (
        {"peak_hr": 100, "rest_ef": 30},
        "dobutamine",
        RiskLevel.HIGH,
        [FindingCode.LOW_RESTING_EF],
        "non-diagnostic with resting LVEF 30 %",
    ),
]


@pytest.mark.parametrize(
    "changes,protocol,risk,criteria",
    [c[:4] for c in RISK_CASES],
    ids=[c[4] for c in RISK_CASES],
)
def test_risk_band(
    changes: dict[str, Any], protocol: str, risk: RiskLevel, criteria: list[FindingCode]
) -> None:
    s = stages(rest=NORMAL_17, peak=changes.get("peak", NORMAL_17))
    if "rest_ef" in changes:
        s["rest"]["lvef_percent"] = changes["rest_ef"]
    if "peak_hr" in changes:
        s["peak"]["heart_rate_bpm"] = changes["peak_hr"]  # 100 of a 136 bpm target
    c = analysed(stages=s, protocol=protocol).conclusion
    assert (c.risk, [r.code for r in c.risk_criteria]) == (risk, criteria)
    assert all(r.level is risk for r in c.risk_criteria)


def test_pdf_shows_perfusion_only_ischaemia_and_the_risk_band() -> None:
    # The territory table agrees with the headline (issue 12): perfusion-only segment 10 (RCA) is
    # listed beside the wall-motion ones, and the answer box gives the risk band (one reversible
    # segment = 5.9 % of the myocardium: intermediate, Fihn SD et al., Circulation 2012, from memory).
    s = stages(rest=NORMAL_17, peak=NORMAL_17)
    s["rest"]["perfusion"], s["peak"]["perfusion"] = NORMAL_17, "111111 111211 1111 1"
    a = analysed(stages=s, contrast={"administration": "infusion"})
    reader = PdfReader(io.BytesIO(pdf_bytes(a)))
    text = " ".join(" ".join(p.extract_text() for p in reader.pages).split())
    assert "10 (perfusion)" in text
    assert "adequate stress; intermediate risk; no high-risk finding" in text
    assert (
        "Risk: intermediate risk (1–3 % per year) by the noninvasive risk tables; criteria met: "
        "moderate reversible perfusion defect and limited inducible ischaemia." in text
    )
