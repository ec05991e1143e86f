"""Narrative wording (reporting.render.narrative): golden sentences of the demo studies and rules.

The golden texts are the exact narrative of each invented demo study. Wording rules checked beside
them: a negative study below the target heart rate is non-diagnostic, never normal (Ballal RS et al.,
1997); akinesis turning dyskinetic is not ischaemia (Elhendy A et al., Chest 1996; Sozzi FB et al.,
JASE 2007); extent limited 1–2, extensive ≥ 3 segments (Kataoka A et al., Cardiovasc Ultrasound
2015;13:47); Duke treadmill score minutes − 5 × ST − 4 × angina index (Mark DB et al., NEJM 1991).
"""

from __future__ import annotations

import re
from importlib import resources
from pathlib import Path

import pytest
import yaml

from reporting.analysis import analyze
from reporting.demo import demo_study_names, demo_study_text
from reporting.errors import InputError
from reporting.load import study_from_data
from reporting.render.narrative import (
    build_narrative,
    narrative_html,
    narrative_text,
    summary,
    text_blocks,
)
from reporting.results import Analysis

GOLDEN = {
    "DEMO-0001": """\
Impression
Negative for inducible ischaemia at adequate stress. Low risk: no inducible ischaemia.
LAD (segments 1, 2, 7, 8, 13, 14 and 17): no wall-motion abnormality at rest or stress. Territory WMSI 1.00 at rest, 1.00 at peak.
LCx (segments 5, 6, 11, 12 and 16): no wall-motion abnormality at rest or stress. Territory WMSI 1.00 at rest, 1.00 at peak.
RCA (segments 3, 4, 9, 10 and 15): no wall-motion abnormality at rest or stress. Territory WMSI 1.00 at rest, 1.00 at peak.
Territories follow the map 'Standard coronary territories (right-dominant)'.

Stress and adequacy
Dobutamine stress echocardiography to 40 μg/kg/min with atropine 0.5 mg; 17-segment model.
Peak heart rate 148 bpm, 91 % of the age-predicted maximum of 162 bpm (220 − age); the target of 138 bpm (85 %) was reached: adequate stress.
Peak rate–pressure product 23976 bpm·mmHg.

Wall motion
Rest: normal wall motion in all 17 segments (WMSI 1.00). LVEF 62 %, end-systolic volume 40 mL.
Low dose (dobutamine 10 μg/kg/min): normal wall motion in all 17 segments (WMSI 1.00).
Peak (dobutamine 40 μg/kg/min, atropine 0.5 mg): normal wall motion in all 17 segments (WMSI 1.00). LVEF 74 %, end-systolic volume 25 mL. Symptoms and ECG: No chest pain. No ST change. Occasional ventricular ectopics.
Recovery: normal wall motion in all 17 segments (WMSI 1.00).

High-risk findings
Risk: low risk (less than 1 % per year) by the noninvasive risk tables; criteria met: no inducible ischaemia.
No high-risk finding identified.
""",
    "DEMO-0002": """\
Impression
Positive for inducible ischaemia in the LAD territory; extensive ischaemia: 5 segments. High risk: extensive ischaemia, large reversible perfusion defect and LV cavity dilation at stress.
LAD (segments 1, 2, 7, 8, 13, 14 and 17): inducible ischaemia in 5 of 7 segments (7, 8, 13, 14 and 17), at worst akinetic at peak; reversible perfusion defect in segments 7, 8, 13, 14 and 17. Territory WMSI 1.00 at rest, 2.00 at peak.
LCx (segments 5, 6, 11, 12 and 16): no wall-motion abnormality at rest or stress. Territory WMSI 1.00 at rest, 1.00 at peak.
RCA (segments 3, 4, 9, 10 and 15): no wall-motion abnormality at rest or stress. Territory WMSI 1.00 at rest, 1.00 at peak.
Territories follow the map 'Standard coronary territories (right-dominant)'.
Segment 17 is often supplied by another artery (LCx or RCA), so the territory named is the usual one, not a certain one.

Stress and adequacy
Dobutamine stress echocardiography to 40 μg/kg/min with atropine 0.25 mg; 17-segment model.
Peak heart rate 136 bpm, 88 % of the age-predicted maximum of 154 bpm (220 − age); the target of 131 bpm (85 %) was reached: adequate stress.
Peak rate–pressure product 22848 bpm·mmHg.

Wall motion
Rest: normal wall motion in all 17 segments (WMSI 1.00). LVEF 60 %, end-systolic volume 38 mL.
Low dose (dobutamine 10 μg/kg/min): normal wall motion in all 17 segments (WMSI 1.00).
Peak (dobutamine 40 μg/kg/min, atropine 0.25 mg): WMSI 1.41. Hypokinetic: segments 7 (mid anterior), 8 (mid anteroseptal) and 13 (apical anterior). Akinetic: segments 14 (apical septal) and 17 (apex). Other segments normal. LVEF 52 %, end-systolic volume 44 mL. Symptoms and ECG: Typical chest pain at peak, relieved in recovery. 1.5 mm horizontal ST depression V3-V5.

Perfusion
Enhancing agent: lipid-shelled perfluorocarbon microspheres.
Rest: normal perfusion in all 17 segments; defect extent 0 %.
Peak: reduced or delayed in segments 7, 8 and 13; absent in segments 14 and 17; defect extent 29 %.
Reversible defects (inducible ischaemia): segments 7, 8, 13, 14 and 17 (LAD).

High-risk findings
Risk: high risk (more than 3 % per year) by the noninvasive risk tables; criteria met: extensive ischaemia, large reversible perfusion defect and LV cavity dilation at stress.
Extensive ischaemia — ischaemia in 5 segments: 7, 8, 13, 14, 17.
Large reversible perfusion defect — reversible perfusion defects in 29.4 % of the myocardium.
LV cavity dilation at stress — LV end-systolic volume rose from 38 to 44 mL.
""",
    "DEMO-0003": """\
Impression
Viability: 5 of 7 segments abnormal at rest are viable (biphasic in segments 1, 7, 8 and 13; sustained improvement in segment 2); with 4 biphasic segments, recovery of global function after revascularisation is likely, though not certain. Positive for inducible ischaemia in the LAD territory; extensive ischaemia: 4 segments. High risk: extensive ischaemia, low resting ejection fraction and high peak WMSI.
LAD (segments 1, 2, 7, 8, 13, 14 and 17): inducible ischaemia in 4 of 7 segments (1, 7, 8 and 13), at worst akinetic at peak; biphasic response (viable and ischaemic) in segments 1, 7, 8 and 13; viable with sustained improvement in segment 2; fixed abnormality (no change with stress) in segment 17; akinesis turning dyskinetic in segment 14. Territory WMSI 2.71 at rest, 2.71 at peak.
LCx (segments 5, 6, 11, 12 and 16): no wall-motion abnormality at rest or stress. Territory WMSI 1.00 at rest, 1.00 at peak.
RCA (segments 3, 4, 9, 10 and 15): no wall-motion abnormality at rest or stress. Territory WMSI 1.00 at rest, 1.00 at peak.
Akinesis turning dyskinetic at stress in segment 14: a mechanical finding, not counted as ischaemia.
Territories follow the map 'Standard coronary territories (right-dominant)'.

Stress and adequacy
Dobutamine stress echocardiography to 40 μg/kg/min with atropine 1 mg; 17-segment model.
Peak heart rate 128 bpm, 85 % of the age-predicted maximum of 149 bpm (220 − age); the target of 127 bpm (85 %) was reached: adequate stress.
Peak rate–pressure product 16128 bpm·mmHg.

Wall motion
Rest: WMSI 1.71. Hypokinetic: segments 1 (basal anterior) and 2 (basal anteroseptal). Akinetic: segments 7 (mid anterior), 8 (mid anteroseptal), 13 (apical anterior), 14 (apical septal) and 17 (apex). Other segments normal. LVEF 30 %, end-systolic volume 118 mL.
Low dose (dobutamine 10 μg/kg/min): WMSI 1.41. Hypokinetic: segments 7 (mid anterior), 8 (mid anteroseptal) and 13 (apical anterior). Akinetic: segments 14 (apical septal) and 17 (apex). Other segments normal. LVEF 38 %.
Peak (dobutamine 40 μg/kg/min, atropine 1 mg): WMSI 1.71. Hypokinetic: segment 1 (basal anterior). Akinetic: segments 7 (mid anterior), 8 (mid anteroseptal), 13 (apical anterior) and 17 (apex). Dyskinetic: segment 14 (apical septal). Other segments normal. LVEF 31 %, end-systolic volume 110 mL. Symptoms and ECG: Mild chest discomfort at peak. No arrhythmia.

High-risk findings
Risk: high risk (more than 3 % per year) by the noninvasive risk tables; criteria met: extensive ischaemia, low resting ejection fraction and high peak WMSI.
Extensive ischaemia — ischaemia in 4 segments: 1, 7, 8, 13.
Low resting ejection fraction — resting LVEF 30 %.
High peak WMSI — peak WMSI 1.71.

Image quality and protocol notes
4 segments show a biphasic response (segments 1, 7, 8, 13); recovery of global function after revascularisation is likely.
""",
    "DEMO-0004": """\
Impression
Inducible ischaemia of the inferior wall at a good workload, with angina and ST depression.

Recommendations
Optimise anti-anginal treatment; consider coronary angiography if symptoms persist.

Computed findings
Positive for inducible ischaemia in the RCA territory; limited ischaemia: 2 segments. Intermediate risk: limited inducible ischaemia and intermediate-risk Duke treadmill score.
LAD (segments 1, 2, 7, 8, 13, 14 and 17): no wall-motion abnormality at rest or stress. Territory WMSI 1.00 at rest, 1.00 at peak exercise.
LCx (segments 5, 6, 11, 12 and 16): no wall-motion abnormality at rest or stress. Territory WMSI 1.00 at rest, 1.00 at peak exercise.
RCA (segments 3, 4, 9, 10 and 15): inducible ischaemia in 2 of 5 segments (4 and 10), at worst hypokinetic at peak exercise. Territory WMSI 1.00 at rest, 1.40 at peak exercise.
Territories follow the map 'Standard coronary territories (right-dominant)'.
Segments 4 and 10 are often supplied by another artery (LCx), so the territory named is the usual one, not a certain one.

Stress and adequacy
Treadmill exercise stress echocardiography; 17-segment model.
Peak heart rate 158 bpm, 95 % of the age-predicted maximum of 166 bpm (220 − age); the target of 142 bpm (85 %) was reached: adequate stress.
Peak rate–pressure product 27492 bpm·mmHg.
Exercise time 7.5 min; maximal ST deviation 2 mm; non-limiting angina (angina index 1).
Duke treadmill score −6.5: intermediate risk (Mark DB et al., NEJM 1991).
Estimated workload 9.2 METs.
Heart-rate recovery 18 bpm in the first minute after exercise: abnormal, at or below the cut-off of 18 bpm (Watanabe J et al., Circulation 2001).

Test conduct
Resting ECG: sinus rhythm, ST depression at rest.
Beta-blocker withheld before the test; nitrate not prescribed.
Exercise stopped for: fatigue, angina.
Complications: none.
Arrhythmias: ventricular ectopic beats.
Image quality: good at rest, adequate at peak exercise.

Wall motion
Rest: normal wall motion in all 17 segments (WMSI 1.00). LVEF 64 %.
Peak exercise: WMSI 1.12. Hypokinetic: segments 4 (basal inferior) and 10 (mid inferior). Other segments normal. LVEF 66 %. Symptoms and ECG: Non-limiting chest pressure at 6 minutes; 2 mm ST depression II, III, aVF.

High-risk findings
Risk: intermediate risk (1–3 % per year) by the noninvasive risk tables; criteria met: limited inducible ischaemia and intermediate-risk Duke treadmill score.
No high-risk finding identified.

Other echocardiographic findings
Mild mitral regurgitation. No pericardial effusion.
""",
    "DEMO-0005": """\
Impression
Non-diagnostic for ischaemia: no ischaemia was shown, but the target heart rate was not reached (peak 112 bpm, 71 % of the age-predicted maximum; target 134 bpm), so ischaemia is not excluded.
LAD (segments 1, 2, 7, 8, 13, 14 and 17): no wall-motion abnormality at rest or stress. Territory WMSI 1.00 at rest, 1.00 at peak.
LCx (segments 5, 6, 11, 12 and 16): no wall-motion abnormality in the segments assessed; segments 5, 6 and 12 not assessable. Territory WMSI 1.00 at rest, 1.00 at peak.
RCA (segments 3, 4, 9, 10 and 15): no wall-motion abnormality at rest or stress. Territory WMSI 1.00 at rest, 1.00 at peak.
Territories follow the map 'Standard coronary territories (right-dominant)'.

Stress and adequacy
Dobutamine stress echocardiography to 40 μg/kg/min with atropine 1 mg; 17-segment model.
Peak heart rate 112 bpm, 71 % of the age-predicted maximum of 157 bpm (220 − age); the target of 134 bpm (85 %) was not reached: submaximal stress, so a study without ischaemia is non-diagnostic.
Peak rate–pressure product 16800 bpm·mmHg.

Wall motion
Rest: normal wall motion in all 17 segments (WMSI 1.00). LVEF 58 %.
Low dose (dobutamine 10 μg/kg/min): normal wall motion in all 17 segments (WMSI 1.00).
Peak (dobutamine 40 μg/kg/min, atropine 1 mg): normal wall motion in the 14 segments visualised (WMSI 1.00). Not visualised: segments 5, 6 and 12. Symptoms and ECG: Test stopped for nausea after maximal dobutamine and atropine.

High-risk findings
Risk not graded: the study is non-diagnostic and meets no risk criterion.
No high-risk finding identified.

Image quality and protocol notes
Not visualised at peak: segments 5, 6, 12.
Contiguous segments were not visualised at peak (segments 5, 6, 12): an ultrasound-enhancing agent is suggested for border definition.
""",
    "DEMO-0006": """\
Impression
Positive for inducible ischaemia in the LAD territory; extensive ischaemia by reversible perfusion defects only: 5 segments. High risk: extensive ischaemia and large reversible perfusion defect.
LAD (segments 1, 2, 7, 8, 13, 14 and 17): no wall-motion abnormality at rest or stress; inducible ischaemia by perfusion in 5 of 7 segments (2, 8, 13, 14 and 17); reversible perfusion defect in segments 2, 8, 13, 14 and 17. Territory WMSI 1.00 at rest, 1.00 at peak.
LCx (segments 5, 6, 11, 12 and 16): no wall-motion abnormality at rest or stress. Territory WMSI 1.00 at rest, 1.00 at peak.
RCA (segments 3, 4, 9, 10 and 15): no wall-motion abnormality at rest or stress. Territory WMSI 1.00 at rest, 1.00 at peak.
Territories follow the map 'Standard coronary territories (right-dominant)'.
Segment 17 is often supplied by another artery (LCx or RCA), so the territory named is the usual one, not a certain one.

Stress and adequacy
Vasodilator stress echocardiography; 17-segment model.
Vasodilator stress: the heart-rate target does not apply.
Peak rate–pressure product 11592 bpm·mmHg.

Test conduct
Resting ECG: sinus rhythm.
Vasodilator: adenosine 140 μg/kg/min.
Stress stopped for: protocol completed.
Complications: none.
Arrhythmias: none.

Wall motion
Rest: normal wall motion in all 17 segments (WMSI 1.00). LVEF 60 %.
Peak: normal wall motion in all 17 segments (WMSI 1.00). LVEF 62 %. Symptoms and ECG: Mild chest tightness and flushing during the vasodilator infusion, settled after it.

Perfusion
Enhancing agent: lipid-shelled perfluorocarbon microspheres.
Rest: normal perfusion in all 17 segments; defect extent 0 %.
Peak: reduced or delayed in segments 2, 8, 13, 14 and 17; defect extent 29 %.
Reversible defects (inducible ischaemia): segments 2, 8, 13, 14 and 17 (LAD).

High-risk findings
Risk: high risk (more than 3 % per year) by the noninvasive risk tables; criteria met: extensive ischaemia and large reversible perfusion defect.
Extensive ischaemia — ischaemia in 5 segments: 2, 8, 13, 14, 17.
Large reversible perfusion defect — reversible perfusion defects in 29.4 % of the myocardium.
""",
}


def _analysis(name: str) -> Analysis:
    return analyze(study_from_data(yaml.safe_load(demo_study_text(f"{name}.yaml"))))


@pytest.mark.parametrize("name", sorted(GOLDEN), ids=sorted(GOLDEN))
def test_golden_narrative_of_each_demo_study(name: str) -> None:
    assert narrative_text(_analysis(name), include_cautions=False) == GOLDEN[name]


@pytest.mark.parametrize("name", demo_study_names())
def test_every_demo_narrative_ends_with_the_cautions(name: str) -> None:
    analysis = analyze(study_from_data(yaml.safe_load(demo_study_text(name))))
    blocks = text_blocks(narrative_text(analysis))
    assert blocks[-1] == ("Cautions", list(analysis.cautions))
    assert "decision support for qualified clinicians" in " ".join(blocks[-1][1]).lower()


def test_below_target_without_ischaemia_is_non_diagnostic_never_normal() -> None:
    # Ballal RS et al., 1997: a negative study below 85 % of the predicted maximum is non-diagnostic
    text = narrative_text(_analysis("DEMO-0005"))
    assert summary(_analysis("DEMO-0005")).startswith("Non-diagnostic for ischaemia")
    assert "Negative for inducible ischaemia" not in text
    assert not re.search(r"\bnormal (study|stress echo)", text, re.IGNORECASE)


def test_every_segment_unseen_at_peak_is_stated_plainly() -> None:
    data = yaml.safe_load(demo_study_text("DEMO-0001.yaml"))
    data["stages"]["peak"]["wall_motion"] = "x" * 17
    data["stages"]["recovery"]["wall_motion"] = "x" * 17  # neither peak nor recovery saw them
    analysis = analyze(study_from_data(data))
    text = narrative_text(analysis)
    # every segment without a score reads as "not scored yet", never as 17 segments unseen
    assert (
        "Peak (dobutamine 40 μg/kg/min, atropine 0.5 mg): wall motion not scored yet "
        "(no segment has a score)." in text
    )
    assert text.splitlines()[1] == (
        "Non-diagnostic for ischaemia: no ischaemia was shown, but no segment of the LAD, LCx "
        "and RCA territories could be assessed at both baseline and stress, so ischaemia is not "
        "excluded there."
    )


def test_multivessel_wording() -> None:
    data = yaml.safe_load(demo_study_text("DEMO-0001.yaml"))
    data["stages"]["peak"]["wall_motion"] = "111211 221111 1111 1"  # RCA 4 and LAD 7, 8
    analysis = analyze(study_from_data(data))
    assert summary(analysis) == (
        "Positive for inducible ischaemia in the LAD and RCA territories; extensive ischaemia: "
        "3 segments, multivessel pattern. High risk: extensive ischaemia and multivessel pattern."
    )


@pytest.mark.parametrize(
    ("recovery", "expected"),
    [
        # Watanabe J et al., Circulation 2001;104:1911: in stress echo a fall of 18 bpm or less in
        # the first minute is abnormal
        (
            18,
            ": abnormal, at or below the cut-off of 18 bpm (Watanabe J et al., Circulation 2001).",
        ),
        (19, ": normal, above the cut-off of 18 bpm (Watanabe J et al., Circulation 2001)."),
        (
            -3,
            ": abnormal, at or below the cut-off of 18 bpm (Watanabe J et al., Circulation 2001).",
        ),  # rate still rising
    ],
    ids=["at-cut-off", "above-cut-off", "negative"],
)
def test_heart_rate_recovery_wording(recovery: int, expected: str) -> None:
    data = yaml.safe_load(demo_study_text("DEMO-0004.yaml"))
    data["exercise"]["hr_recovery_1min_bpm"] = recovery
    paragraphs = dict(text_blocks(narrative_text(_analysis_of(data))))["Stress and adequacy"]
    shown = f"{recovery}" if recovery >= 0 else f"−{-recovery}"
    assert f"Heart-rate recovery {shown} bpm in the first minute after exercise{expected}" in (
        paragraphs
    )


def test_bicycle_study_states_exercise_details_without_a_duke_score() -> None:
    # the Duke score was derived on the Bruce treadmill protocol (Mark DB et al., NEJM 1991)
    data = yaml.safe_load(demo_study_text("DEMO-0004.yaml"))
    data["protocol"] = "bicycle"
    data["exercise"] = {"duration_min": 11, "max_st_deviation_mm": 0, "angina_index": 0}
    paragraphs = dict(text_blocks(narrative_text(_analysis_of(data))))["Stress and adequacy"]
    assert "Exercise time 11 min; maximal ST deviation 0 mm; no angina (angina index 0)." in (
        paragraphs
    )
    assert not any("Duke" in p or "Heart-rate recovery" in p for p in paragraphs)


def test_no_exercise_sentence_without_an_exercise_test() -> None:
    paragraphs = dict(text_blocks(narrative_text(_analysis("DEMO-0002"))))["Stress and adequacy"]
    assert not any(p.startswith(("Exercise time", "Heart-rate recovery")) for p in paragraphs)


def _analysis_of(data: dict[str, object]) -> Analysis:
    return analyze(study_from_data(data))


def test_sections_without_content_are_left_out() -> None:
    keys = [s.key for s in build_narrative(_analysis("DEMO-0001")).sections]
    assert keys == ["impression", "stress", "wall_motion", "high_risk", "cautions"]


def test_lab_template_folder_overrides_the_packaged_template(tmp_path: Path) -> None:
    (tmp_path / "narrative.txt.j2").write_text(
        "{% for section in sections %}== {{ section.heading }} ==\n{% endfor %}", encoding="utf-8"
    )
    text = narrative_text(_analysis("DEMO-0002"), templates_dir=tmp_path)
    assert text.startswith("== Impression ==\n== Stress and adequacy ==\n")


def test_broken_lab_template_is_a_located_input_error(tmp_path: Path) -> None:
    # StrictUndefined: an unknown variable is an error, not an empty string
    (tmp_path / "narrative.txt.j2").write_text("{{ no_such_thing }}", encoding="utf-8")
    with pytest.raises(InputError, match=r"template narrative\.txt\.j2"):
        narrative_text(_analysis("DEMO-0002"), templates_dir=tmp_path)


def test_html_narrative_escapes_user_text() -> None:
    data = yaml.safe_load(demo_study_text("DEMO-0002.yaml"))
    data["stages"]["peak"]["symptoms"] = "<script>alert(1)</script> & </p>"
    html = narrative_html(analyze(study_from_data(data)))
    assert "<script>" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt; &amp; &lt;/p&gt;" in html


def test_packaged_templates_only_substitute_and_loop() -> None:
    # Design rule of this project: phrasing is decided in Python; templates hold no branching logic
    folder = resources.files("reporting.render").joinpath("templates")
    names = [p.name for p in folder.iterdir() if p.name.endswith(".j2")]
    assert {"narrative.txt.j2", "narrative.html.j2"} <= set(names)
    for name in names:
        text = folder.joinpath(name).read_text(encoding="utf-8")
        tags = re.findall(r"{%-?\s*(\w+)", text)
        assert set(tags) <= {"for", "endfor"}, name


def _heart_rate_case(age: int, peak_hr: int) -> Analysis:
    """DEMO-0001 (dobutamine, 220 − age) with the given age and peak heart rate."""
    data = yaml.safe_load(demo_study_text("DEMO-0001.yaml"))
    data["patient"]["age_years"] = age
    data["stages"]["peak"]["heart_rate_bpm"] = peak_hr
    return _analysis_of(data)


def test_target_just_missed_never_reads_as_reached() -> None:
    # Age 55, 220 − age: maximum 165 bpm, target 0.85 × 165 = 140.25 bpm, so a peak of 140 bpm
    # (84.8 %) misses it. Printed as "target 140 bpm" and "85 %" the words would contradict the
    # decision; the target is rounded up and the percentage down (Ballal RS et al., 1997).
    analysis = _heart_rate_case(55, 140)
    assert analysis.stress.target_hr_bpm == pytest.approx(140.25)
    assert not analysis.stress.adequate
    assert summary(analysis) == (
        "Non-diagnostic for ischaemia: no ischaemia was shown, but the target heart rate was not "
        "reached (peak 140 bpm, 84 % of the age-predicted maximum; target 141 bpm), so ischaemia "
        "is not excluded."
    )
    stress = dict(text_blocks(narrative_text(analysis)))["Stress and adequacy"]
    assert stress[1] == (
        "Peak heart rate 140 bpm, 84 % of the age-predicted maximum of 165 bpm (220 − age); the "
        "target of 141 bpm (85 %) was not reached: submaximal stress, so a study without "
        "ischaemia is non-diagnostic."
    )
    text = narrative_text(analysis)
    assert "target 140 bpm" not in text and "85 % of the age-predicted" not in text


@pytest.mark.parametrize(
    ("age", "peak_hr"),
    [(55, 140), (55, 141), (20, 170), (20, 169), (63, 133), (64, 133), (47, 147), (88, 112)],
    ids=lambda v: str(v),
)
def test_printed_heart_rate_figures_agree_with_the_decision(age: int, peak_hr: int) -> None:
    # whatever the rounding, "reached" goes with peak ≥ printed target and ≥ 85 %, and vice versa
    analysis = _heart_rate_case(age, peak_hr)
    line = dict(text_blocks(narrative_text(analysis)))["Stress and adequacy"][1]
    found = re.search(
        r"bpm, (\d+) % of .* the target of (\d+) bpm \((\d+) %\) was (not )?reached", line
    )
    assert found is not None, line
    percent, target, fraction = (int(found.group(i)) for i in (1, 2, 3))
    reached = found.group(4) is None
    assert reached is analysis.stress.adequate
    assert (peak_hr >= target) is reached
    assert (percent >= fraction) is reached
