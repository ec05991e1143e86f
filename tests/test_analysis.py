"""Study -> Analysis end to end: WMSI, territories, perfusion, stress, conclusions, notes."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
from conftest import NORMAL_17, analysed, stages, study_dict
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from reporting.analysis import analyze, analyze_file
from reporting.export.record import record_dict
from reporting.load import study_from_data
from reporting.model import Stage, Study
from reporting.results import DiagnosticStatus, FindingCode, NoteKind
from reporting.scoring import WallMotionResponse
from reporting.segments import Territory
from reporting.settings import Settings, default_settings


def test_normal_study() -> None:
    a = analysed()
    assert a.wmsi == {Stage.REST: 1.0, Stage.PEAK: 1.0}
    assert a.wmsi_scored_segments == {Stage.REST: 17, Stage.PEAK: 17}
    assert a.conclusion.status is DiagnosticStatus.NO_ISCHEMIA
    assert not a.conclusion.ischemia
    assert all(s.response is WallMotionResponse.NORMAL for s in a.segments)


def test_lad_ischemia_wmsi_and_territories() -> None:
    # Peak: 7, 8, 13, 14, 17 abnormal. Territory map of Cerqueira 2002.
    a = analysed(stages=stages(rest=NORMAL_17, peak="111111 221111 2311 3"))
    assert a.wmsi[Stage.PEAK] == pytest.approx((12 + 2 + 2 + 2 + 3 + 3) / 17)
    lad = a.territories[Territory.LAD]
    assert lad.ischemic_segments == [7, 8, 13, 14, 17]
    assert lad.wmsi[Stage.PEAK] == pytest.approx((1 + 1 + 2 + 2 + 2 + 3 + 3) / 7)
    assert a.territories[Territory.RCA].wmsi[Stage.PEAK] == pytest.approx(1.0)
    assert a.conclusion.ischemic_territories == [Territory.LAD]
    assert a.conclusion.ischemia_extent.value == "moderate_severe"
    assert FindingCode.EXTENSIVE_ISCHEMIA in {f.code for f in a.conclusion.high_risk_findings}
    assert not a.conclusion.multivessel


def test_16_vs_17_segment_wmsi() -> None:
    # Lang 2015, figure 3: the 16-segment model has no apex, so the same scores give a different index.
    s16 = study_dict(
        segment_model=16, stages=stages(rest="111111 111111 1111", peak="111111 111111 3311")
    )
    s17 = study_dict(stages=stages(rest=NORMAL_17, peak="111111 111111 3311 3"))
    a16, a17 = analyze(study_from_data(s16)), analyze(study_from_data(s17))
    assert a16.wmsi[Stage.PEAK] == pytest.approx(20 / 16)
    assert a17.wmsi[Stage.PEAK] == pytest.approx(23 / 17)
    assert len(a16.segments) == 16


def test_wmsi_excluding_apex_setting() -> None:
    # Lang 2015: some labs leave the apical cap out of WMSI.
    study = study_from_data(study_dict(stages=stages(rest=NORMAL_17, peak="111111 111111 1111 3")))
    lab = Settings.model_validate(default_settings().model_dump() | {"wmsi_excludes_apex": True})
    a = analyze(study, settings=lab)
    assert a.wmsi[Stage.PEAK] == 1.0 and a.wmsi_scored_segments[Stage.PEAK] == 16
    assert a.segments[16].response is WallMotionResponse.ISCHEMIC


def test_not_visualised_left_out_and_not_assessable() -> None:
    a = analysed(stages=stages(rest="x11111 111111 1111 1", peak="111111 111111 111x 1"))
    assert a.wmsi_scored_segments == {Stage.REST: 16, Stage.PEAK: 16}
    assert a.segments[0].response is WallMotionResponse.NOT_ASSESSABLE
    assert a.segments[15].response is WallMotionResponse.NOT_ASSESSABLE


def test_akinetic_to_dyskinetic_is_not_ischemia() -> None:
    # Elhendy A et al., Chest 1996; Sozzi FB et al., JASE 2007.
    a = analysed(stages=stages(rest="111111 111111 3111 1", peak="111111 111111 4111 1"))
    assert a.segments[12].response is WallMotionResponse.AKINETIC_TO_DYSKINETIC
    assert a.conclusion.akinetic_to_dyskinetic_segments == [13]
    assert not a.conclusion.ischemia
    assert a.territories[Territory.LAD].ischemic_segments == []


def test_inadequate_stress_negative_is_non_diagnostic() -> None:
    # Ballal RS et al., 1997: a negative study below 85 % of APMHR is non-diagnostic.
    s = stages(rest=NORMAL_17, peak=NORMAL_17)
    s["peak"]["heart_rate_bpm"] = 120  # age 60: target 136 bpm
    a = analysed(stages=s)
    assert not a.stress.adequate
    assert a.stress.target_hr_bpm == pytest.approx(136.0)
    assert a.stress.peak_hr_percent_of_predicted == pytest.approx(75.0)
    assert a.conclusion.status is DiagnosticStatus.NON_DIAGNOSTIC


def test_inadequate_stress_with_ischemia_is_still_positive() -> None:
    s = stages(rest=NORMAL_17, peak="111111 211111 1111 1")
    s["peak"]["heart_rate_bpm"] = 110
    a = analysed(stages=s)
    assert a.conclusion.status is DiagnosticStatus.ISCHEMIA


def test_age_from_birth_date() -> None:
    a = analysed(
        patient={"birth_date": "1966-10-15"}
    )  # study 2026-10-14: one day before the birthday
    assert a.patient.age_years == 59
    assert a.stress.age_predicted_max_hr_bpm == 161


def test_unknown_age_is_not_adequate() -> None:
    a = analysed(patient={})
    assert not a.stress.adequate
    assert NoteKind.AGE_UNKNOWN in {n.kind for n in a.notes}
    assert a.conclusion.status is DiagnosticStatus.NON_DIAGNOSTIC


def test_vasodilator_needs_no_heart_rate_target() -> None:
    a = analysed(protocol="vasodilator")
    assert a.stress.adequate and not a.stress.heart_rate_target_applies


def test_rate_pressure_product_per_stage() -> None:
    a = analysed()
    assert a.stress.rate_pressure_product == {Stage.REST: 70 * 120, Stage.PEAK: 150 * 150}


def test_treadmill_duke_score() -> None:
    # Mark DB et al., NEJM 1991;325:849.
    a = analysed(
        protocol="treadmill",
        exercise={"duration_min": 4, "max_st_deviation_mm": 2, "angina_index": 2},
    )
    assert a.stress.duke_treadmill_score == pytest.approx(-14)
    assert a.stress.duke_risk is not None and a.stress.duke_risk.value == "high"
    assert FindingCode.DUKE_HIGH_RISK in {f.code for f in a.conclusion.high_risk_findings}


def test_duke_not_computed_for_dobutamine_or_bicycle() -> None:
    assert analysed().stress.duke_risk is None
    bike = analysed(
        protocol="bicycle",
        exercise={"duration_min": 9, "max_st_deviation_mm": 0, "angina_index": 0},
    )
    assert bike.stress.duke_risk is None
    assert NoteKind.DUKE_NOT_APPLICABLE in {n.kind for n in bike.notes}


def test_perfusion_defects() -> None:
    s = stages(rest=NORMAL_17, peak=NORMAL_17)
    s["rest"]["perfusion"] = "111111 111111 1111 2"
    s["peak"]["perfusion"] = {**{n: 1 for n in range(1, 18)}, 7: 2, 13: 3, 17: 2, 16: "x"}
    a = analysed(stages=s, contrast={"administration": "infusion", "imaging_mi": 0.12})
    assert a.perfusion.reversible_segments == [7, 13]
    assert a.perfusion.fixed_segments == [17]
    assert a.perfusion.defect_extent_percent[Stage.REST] == pytest.approx(100 / 17)
    assert a.perfusion.defect_extent_percent[Stage.PEAK] == pytest.approx(100 * 3 / 16)
    assert a.perfusion.score_index[Stage.PEAK] == pytest.approx((13 + 2 + 3 + 2) / 16)
    # A reversible perfusion defect (normal at rest, abnormal at stress) alone is inducible
    # ischaemia (Porter TR et al., JASE 2018;31:241, from memory).
    assert a.conclusion.ischemia and a.conclusion.ischemic_territories == [Territory.LAD]


def test_multivessel_and_low_threshold_ischemia() -> None:
    s = stages(rest=NORMAL_17, low_dose="121211 111211 1111 1", peak="121211 121211 1111 1")
    s["low_dose"]["dose_ug_kg_min"] = 10
    a = analysed(stages=s)
    codes = {f.code for f in a.conclusion.high_risk_findings}
    # ACC/AHA appropriate-use noninvasive risk table: > 2 segments at low dose; >= 2 territories.
    assert FindingCode.LOW_THRESHOLD_ISCHEMIA in codes
    assert FindingCode.MULTIVESSEL_ISCHEMIA in codes
    assert a.conclusion.multivessel
    assert all(f.source for f in a.conclusion.high_risk_findings)


def test_low_resting_ef_and_peak_wmsi() -> None:
    s = stages(rest="333111 333111 3311 3", peak="333111 333111 3311 3")
    s["rest"]["lvef_percent"] = 30
    a = analysed(stages=s)
    codes = {f.code for f in a.conclusion.high_risk_findings}
    assert FindingCode.LOW_RESTING_EF in codes  # resting EF < 35 % (ACC/AHA table)
    assert FindingCode.HIGH_PEAK_WMSI in codes  # peak WMSI > 1.7 (Yao SS et al., JACC 2003)


def test_contrast_suggested_for_contiguous_unseen_segments() -> None:
    a = analysed(stages=stages(rest=NORMAL_17, peak="1111xx 11111x 1111 1"))
    kinds = {n.kind for n in a.notes}
    assert NoteKind.SUGGEST_CONTRAST in kinds
    scattered = analysed(stages=stages(rest=NORMAL_17, peak="x11x11 111111 1111 1"))
    assert NoteKind.SUGGEST_CONTRAST not in {n.kind for n in scattered.notes}


def test_high_mi_perfusion_and_bolus_curves_warn() -> None:
    s = stages(rest=NORMAL_17, peak=NORMAL_17)
    s["rest"]["perfusion"] = NORMAL_17
    a = analysed(
        stages=s, contrast={"administration": "bolus", "imaging_mi": 0.5}, perfusion_curves="c.csv"
    )
    kinds = {n.kind for n in a.notes}
    assert NoteKind.HIGH_MI_PERFUSION in kinds
    assert NoteKind.BOLUS_QUANTIFICATION in kinds


def test_left_dominant_map_changes_territories() -> None:
    a = analysed(
        territory_map="left_dominant", stages=stages(rest=NORMAL_17, peak="111211 111111 1111 1")
    )
    assert a.conclusion.ischemic_territories == [Territory.LCX]
    assert a.territory_map.name == "left_dominant"
    assert a.territories[Territory.RCA].wmsi[Stage.PEAK] is None


def test_lab_map_from_study_folder(tmp_path: Path) -> None:
    (tmp_path / "ourmap.yaml").write_text(
        "name: ours\nterritories:\n  '17':\n    LAD: [1,2,7,8,13,14,15,16,17]\n    RCA: [3,4,9,10]\n    LCx: [5,6,11,12]\n"
    )
    data = study_dict(
        territory_map="ourmap.yaml", stages=stages(rest=NORMAL_17, peak="111111 111111 1121 1")
    )
    (tmp_path / "s.json").write_text(json.dumps(data))
    a = analyze_file(tmp_path / "s.json")
    assert a.territory_map.name == "ours"
    assert a.conclusion.ischemic_territories == [Territory.LAD]


CONTRACT_KEYS = [
    "schema_version",
    "segment_model",
    "wmsi",
    "segments",
    "territories",
    "perfusion",
    "stress",
    "conclusion",
]


def test_record_has_contract_keys() -> None:
    r = record_dict(analysed())
    for key in CONTRACT_KEYS:
        assert key in r
    assert r["study"]["id"] == "T-0001"
    seg = r["segments"][0]
    assert set(seg) >= {
        "number",
        "name",
        "territory",
        "wall_motion",
        "perfusion",
        "response",
        "perfusion_response",
    }
    assert set(r["territories"]) == {"LAD", "LCx", "RCA"}
    assert set(r["territories"]["LAD"]) >= {"segments", "ischemic_segments", "wmsi"}
    assert set(r["perfusion"]) >= {"defect_extent_percent", "reversible_segments", "fixed_segments"}
    assert set(r["stress"]) >= {
        "age_predicted_max_hr_bpm", "target_hr_bpm", "peak_hr_percent_of_predicted", "adequate",
        "rate_pressure_product", "duke_treadmill_score", "duke_risk",
    }  # fmt: skip
    assert set(r["conclusion"]) >= {"ischemia", "ischemic_territories", "high_risk_findings"}
    # Added in the second round (issue 12): territory and study status, risk with its criteria.
    assert {t["status"] for t in r["territories"].values()} == {"no_ischemia"}
    assert (r["conclusion"]["status"], r["conclusion"]["multivessel"]) == ("no_ischemia", False)
    assert r["conclusion"]["risk"] == "low"
    assert [c["code"] for c in r["conclusion"]["risk_criteria"]] == ["no_inducible_ischemia"]
    assert list(r["wmsi"]) == ["rest", "peak"]


score_char = st.sampled_from("1234x")


@settings(max_examples=60, suppress_health_check=[HealthCheck.too_slow])
@given(
    rest=st.text(score_char, min_size=17, max_size=17),
    peak=st.text(score_char, min_size=17, max_size=17),
)
def test_territory_wmsi_is_mean_of_its_segments(rest: str, peak: str) -> None:
    a = analysed(stages=stages(rest=rest, peak=peak))
    for territory, result in a.territories.items():
        for stage in (Stage.REST, Stage.PEAK):
            scores = [s.wall_motion[stage] for s in a.segments if s.territory is territory]
            scored = [v for v in scores if v is not None]
            expected = sum(scored) / len(scored) if scored else None
            assert result.wmsi[stage] == (pytest.approx(expected) if expected is not None else None)
    for value in a.wmsi.values():
        assert 1.0 <= value <= 4.0
    ischemic = {s.number for s in a.segments if s.response.value in ("ischemic", "biphasic")}
    assert {n for t in a.territories.values() for n in t.ischemic_segments} == ischemic
    assert a.conclusion.ischemia == bool(ischemic)


@settings(max_examples=40, suppress_health_check=[HealthCheck.too_slow])  # slow on a busy machine
@given(
    rest=st.text(score_char, min_size=17, max_size=17),
    peak=st.dictionaries(
        st.integers(1, 17), st.one_of(st.none(), st.integers(1, 3)), min_size=17, max_size=17
    ),
)
def test_study_round_trips_through_json(rest: str, peak: dict[int, int | None]) -> None:
    s = stages(rest=rest, peak=NORMAL_17)
    s["peak"]["perfusion"] = peak
    study = study_from_data(study_dict(stages=s))
    again = Study.model_validate_json(study.model_dump_json())
    assert again == study
    dumped: Any = json.loads(study.model_dump_json())
    assert study_from_data(dumped) == study


@pytest.mark.parametrize(
    "recovery,abnormal",
    [
        (18, True),  # Watanabe J et al., Circulation 2001;104:1911: <= 18 bpm at 1 min abnormal
        (19, False),  # Watanabe 2001: above the stress-echo cut-off
        (12, True),  # also at or below Cole CR et al., NEJM 1999 (cool-down walk)
        (None, None),
    ],
)
def test_heart_rate_recovery(recovery: int | None, abnormal: bool | None) -> None:
    # In stress echo the patient lies down at once: the cut-off is 18 bpm (Watanabe J et al., Circulation 2001;104:1911).
    exercise = {
        "duration_min": 9,
        "max_st_deviation_mm": 1,
        "angina_index": 0,
        "hr_recovery_1min_bpm": recovery,
    }
    a = analysed(protocol="treadmill", exercise=exercise)
    assert a.stress.hr_recovery_abnormal is abnormal
    assert a.stress.exercise_duration_min == 9 and a.stress.angina_index == 0


def test_worsening_rest_defect_is_flagged_not_called_ischaemia() -> None:
    # Porter TR et al., JASE 2018;31:241 (from memory): reversible = normal at rest, abnormal at
    # peak; a fixed defect that worsens is noted for review (common practice).
    s = stages(rest=NORMAL_17, peak=NORMAL_17)
    s["rest"]["perfusion"] = "211111 111111 1111 1"
    s["peak"]["perfusion"] = "311111 111111 1111 1"
    a = analysed(stages=s, contrast={"administration": "infusion", "imaging_mi": 0.12})
    assert a.perfusion.partially_reversible_segments == [1]
    assert a.perfusion.reversible_segments == []
    assert not a.conclusion.ischemia
    assert a.territories[Territory.LAD].partially_reversible_perfusion_segments == [1]
    assert NoteKind.WORSENING_DEFECT in {n.kind for n in a.notes}


def test_no_peak_stage_is_not_adequate() -> None:
    s = stages(rest=NORMAL_17, low_dose=NORMAL_17)
    s["low_dose"]["heart_rate_bpm"] = 150
    a = analysed(stages=s)
    assert not a.stress.adequate
    assert "No peak stage" in a.stress.adequacy_note
    assert a.conclusion.status is DiagnosticStatus.NON_DIAGNOSTIC


def test_lab_threshold_is_cited_as_a_lab_setting() -> None:
    study = study_from_data(study_dict(stages=stages(rest=NORMAL_17, peak="221111 111111 1111 1")))
    lab = Settings.model_validate(
        default_settings().model_dump() | {"peak_wmsi_high_risk_above": 1.05}
    )
    finding = next(
        f
        for f in analyze(study, settings=lab).conclusion.high_risk_findings
        if f.code is FindingCode.HIGH_PEAK_WMSI
    )
    assert finding.source.startswith(
        "Lab setting peak_wmsi_high_risk_above = 1.05 (published default 1.7: Yao"
    )


@pytest.mark.parametrize("path", ["../outside.csv", "/etc/passwd"], ids=["parent", "absolute"])
def test_curve_file_must_stay_beside_the_study(tmp_path: Path, path: str) -> None:
    from reporting.errors import InputError

    data = study_dict(perfusion_curves=path, contrast={"administration": "infusion"})
    (tmp_path / "s.json").write_text(json.dumps(data))
    with pytest.raises(InputError) as caught:
        analyze_file(tmp_path / "s.json")
    # The whole message: where (the study file's key) and what (the path as written).
    assert str(caught.value) == (
        f"{tmp_path / 's.json'}: perfusion_curves: {path!r} must be a path inside the study's folder"
    )


def test_unknown_territory_map_option_lists_built_ins(tmp_path: Path) -> None:
    from reporting.errors import InputError

    (tmp_path / "s.json").write_text(json.dumps(study_dict()))
    with pytest.raises(InputError) as caught:
        analyze_file(tmp_path / "s.json", territory_map="bogus")
    assert str(caught.value) == (
        "--territory-map: 'bogus' is neither a built-in map (standard, left_dominant) nor a file"
    )
