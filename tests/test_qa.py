"""Lab quality review: records, angiography CSV, 2×2 measures with Wilson intervals, review, PDF."""

from __future__ import annotations

import datetime as dt
import io
import json
import logging
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pypdf import PdfReader
from statsmodels.stats.proportion import proportion_confint  # type: ignore[import-untyped]

from reporting.analysis import analyze
from reporting.errors import InputError, InputErrors
from reporting.export.record import record_json
from reporting.load import study_from_data
from reporting.qa.angio import Angiography, Vessel, parse_angiography, read_angiography
from reporting.qa.metrics import diagnostic_accuracy, proportion, wilson_interval
from reporting.qa.pdf import review_pdf_bytes, write_review_pdf
from reporting.qa.records import read_records
from reporting.qa.review import (
    Outcome,
    QualityReview,
    build_review,
    review_json,
    run_review,
)
from reporting.qa.status import ReviewClass, review_class
from reporting.results import Analysis, DiagnosticStatus
from reporting.segments import Territory

# --- building test records --------------------------------------------------------------------

# Segments of the standard 17-segment map (Cerqueira 2002) used to make a territory ischaemic.
ISCHEMIC_SEGMENTS = {Territory.LAD: (7, 8), Territory.LCX: (5, 6), Territory.RCA: (3, 4)}


def wall_motion(abnormal: set[int]) -> str:
    scores = "".join("2" if n in abnormal else "1" for n in range(1, 18))
    return f"{scores[:6]} {scores[6:12]} {scores[12:16]} {scores[16]}"


def study(
    study_id: str,
    *,
    ischemic: tuple[Territory, ...] = (),
    date: str = "2026-10-14",
    reader: str | None = "Dr Ada Brightwater",
    protocol: str = "dobutamine",
    adequate: bool = True,
    peak: str | None = None,
) -> dict[str, Any]:
    """A small study: normal at rest, peak abnormal in ``ischemic`` territories."""
    abnormal = {n for t in ischemic for n in ISCHEMIC_SEGMENTS[t]}
    info: dict[str, Any] = {"id": study_id, "date": date}
    if reader is not None:
        info["reader"] = reader
    return {
        "schema_version": 1,
        "study": info,
        "patient": {"age_years": 60},
        "protocol": protocol,
        "stages": {
            "rest": {
                "heart_rate_bpm": 70,
                "systolic_bp_mmhg": 120,
                "wall_motion": wall_motion(set()),
            },
            # Age 60: target 85 % of 160 = 136 bpm; 110 bpm is inadequate for dobutamine.
            "peak": {
                "heart_rate_bpm": 150 if adequate else 110,
                "systolic_bp_mmhg": 140,
                "wall_motion": peak or wall_motion(abnormal),
            },
        },
    }


def record(study_id: str, **kwargs: Any) -> Analysis:
    return analyze(study_from_data(study(study_id, **kwargs)))


def viability_study(study_id: str, *, reader: str | None = "Dr Ada Brightwater") -> dict[str, Any]:
    """A low-dose viability study: akinetic anterior wall at rest improving at 10 μg/kg/min, no peak."""
    data = study(study_id, reader=reader, date="2026-02-20")
    rest = "111111 333111 3311 1"  # invented: anterior and apical segments akinetic at rest
    data["stages"] = {
        "rest": {"heart_rate_bpm": 70, "systolic_bp_mmhg": 120, "wall_motion": rest},
        "low_dose": {
            "heart_rate_bpm": 84,
            "systolic_bp_mmhg": 130,
            "dose_ug_kg_min": 10,
            "wall_motion": "111111 222111 2211 1",
        },
    }
    return data


def write_records(folder: Path, records: list[Analysis]) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    for r in records:
        (folder / f"{r.study.id}.record.json").write_text(record_json(r), encoding="utf-8")
    return folder


def angio(study_id: str, **stenosis: float) -> Angiography:
    return Angiography(
        study_id=study_id, stenosis_percent={Vessel(k): v for k, v in stenosis.items()}
    )


ANGIO_HEADER = "study_id,vessel,stenosis_percent\n"


# --- Wilson interval and 2×2 measures ---------------------------------------------------------


@pytest.mark.parametrize(
    ("k", "n"),
    [(0, 1), (1, 1), (0, 20), (1, 29), (15, 148), (81, 263), (50, 100), (231, 258), (999, 1000)],
)
def test_wilson_matches_statsmodels(k: int, n: int) -> None:
    # Reference library: statsmodels proportion_confint(method="wilson").
    low, high = proportion_confint(k, n, alpha=0.05, method="wilson")
    ours = wilson_interval(k, n)
    assert ours[0] == pytest.approx(low, abs=1e-12)
    assert ours[1] == pytest.approx(high, abs=1e-12)


@pytest.mark.parametrize(
    ("k", "n", "low", "high"),
    [
        (81, 263, 0.2553, 0.3662),
        (15, 148, 0.0624, 0.1605),
        (0, 20, 0.0, 0.1611),
        (1, 29, 0.0061, 0.1718),
    ],
    ids=["81/263", "15/148", "0/20", "1/29"],
)
def test_wilson_published_examples(k: int, n: int, low: float, high: float) -> None:
    # Newcombe RG, Stat Med 1998;17:857–872, table II, method 3 (score, no continuity correction);
    # values from memory, four decimals.
    ours = wilson_interval(k, n)
    assert ours[0] == pytest.approx(low, abs=6e-5)
    assert ours[1] == pytest.approx(high, abs=6e-5)


@given(n=st.integers(1, 5000), data=st.data())
def test_wilson_interval_contains_estimate(n: int, data: st.DataObject) -> None:
    k = data.draw(st.integers(0, n))
    low, high = wilson_interval(k, n)
    assert 0.0 <= low <= k / n <= high <= 1.0
    # Symmetry: the interval of the complement mirrors this one.
    c_low, c_high = wilson_interval(n - k, n)
    assert c_low == pytest.approx(1 - high, abs=1e-12)
    assert c_high == pytest.approx(1 - low, abs=1e-12)


@pytest.mark.parametrize(
    ("k", "n"),
    [(-1, 5), (6, 5), (0, 0)],
    ids=["negative count", "count above denominator", "empty denominator"],
)
def test_wilson_refuses_impossible_counts(k: int, n: int) -> None:
    with pytest.raises(ValueError):
        wilson_interval(k, n)


def test_altman_bland_liver_scan_example() -> None:
    # Altman DG, Bland JM. Diagnostic tests 1: sensitivity and specificity. BMJ 1994;308:1552 —
    # liver scan against pathology: 231 true positives, 32 false positives, 27 false negatives,
    # 54 true negatives; sensitivity 231/258 = 0.90, specificity 54/86 = 0.63 (confirmed through a
    # secondary teaching page). Predictive values 231/263 = 0.88 and 54/81 = 0.67 from Diagnostic
    # tests 2: predictive values, BMJ 1994;309:102 (from memory).
    table = diagnostic_accuracy(231, 32, 27, 54)
    assert table.total == 344
    assert (table.sensitivity.numerator, table.sensitivity.denominator) == (231, 258)
    assert (table.specificity.numerator, table.specificity.denominator) == (54, 86)
    assert table.sensitivity.value == pytest.approx(0.90, abs=0.005)
    assert table.specificity.value == pytest.approx(0.63, abs=0.005)
    assert table.ppv.value == pytest.approx(0.88, abs=0.005)
    assert table.npv.value == pytest.approx(0.67, abs=0.005)
    assert table.accuracy.value == pytest.approx(285 / 344)


def test_empty_denominator_has_no_value() -> None:
    p = proportion(0, 0)
    assert (p.value, p.ci_low, p.ci_high) == (None, None, None)
    table = diagnostic_accuracy(0, 0, 0, 3)
    assert table.sensitivity.value is None
    assert table.specificity.value == 1.0


# --- angiography CSV ---------------------------------------------------------------------------


def test_left_main_counts_for_lad_and_lcx() -> None:
    # Left main supplies the LAD and LCx territories (issue 6; Cerqueira 2002 territory map).
    result = parse_angiography(ANGIO_HEADER + "S-1,LM,80\n")["S-1"]
    assert result.territory_stenosis(Territory.LAD) == 80
    assert result.territory_stenosis(Territory.LCX) == 80
    assert result.territory_stenosis(Territory.RCA) == 0


def test_largest_stenosis_per_vessel_counts_and_missing_vessel_is_zero() -> None:
    text = ANGIO_HEADER + "S-1,LAD,40\nS-1,lad,90 %\nS-1,LAD,60\n"
    result = parse_angiography(text)["S-1"]
    assert result.stenosis_percent == {Vessel.LAD: 90.0}
    assert result.vessel_stenosis(Vessel.RCA) == 0.0


def test_bad_rows_each_reported_with_line_number(tmp_path: Path) -> None:
    path = tmp_path / "ANGIO.csv"
    path.write_text(
        ANGIO_HEADER
        + "S-1,LAD,80\n"  # line 2: fine
        + "S-1,OM1,50\n"  # line 3: not one of the four vessels
        + "S-2,RCA,140\n"  # line 4: a stenosis cannot exceed 100 %
        + "S-1,LAD,80\n"  # line 5: repeats line 2
        + "S-3,LCx,severe\n"  # line 6: not a number
        + "\n"  # line 7: blank, skipped
        + "S-4,RCA\n"  # line 8: a field missing
        + ",LAD,50\n"  # line 9: no study id
        + "S-5,RCA,-5\n",  # line 10: negative stenosis
        encoding="utf-8",
    )
    with pytest.raises(InputErrors) as caught:
        read_angiography(path)
    messages = [str(p) for p in caught.value.problems]
    assert messages == [
        f"{path}: line 3: vessel 'OM1' is not one of LAD, LCx, RCA, LM",
        f"{path}: line 4: stenosis_percent 140 is outside 0–100 %",
        f"{path}: line 5: repeats line 2 (S-1, LAD, 80 %); remove the copy (only the largest stenosis per vessel counts)",
        f"{path}: line 6: stenosis_percent 'severe' is not a number",
        f"{path}: line 8: 2 field(s); the header has 3 columns",
        f"{path}: line 9: study_id is empty",
        f"{path}: line 10: stenosis_percent -5 is outside 0–100 %",
    ]


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("", "file is empty"),  # nothing at all
        ("study_id,vessel\nS-1,LAD\n", "missing column(s) stenosis_percent"),  # column missing
        ("study_id,vessel,vessel,stenosis_percent\n", "column 'vessel' appears twice"),  # ambiguous
    ],
    ids=["empty", "missing column", "repeated column"],
)
def test_bad_headers(text: str, message: str) -> None:
    with pytest.raises((InputError, InputErrors)) as caught:
        parse_angiography(text, source="ANGIO.csv")
    assert message in str(caught.value)


def test_extra_columns_and_bom_are_accepted(tmp_path: Path) -> None:
    path = tmp_path / "angio.csv"
    path.write_bytes(
        "\ufeffStudy_ID , vessel, stenosis_percent, note\nS-1,RCA,75,proximal\n".encode()
    )
    assert read_angiography(path)["S-1"].stenosis_percent == {Vessel.RCA: 75.0}


def test_unreadable_angiography_file(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="cannot read"):
        read_angiography(tmp_path / "missing.csv")


# --- reading records ---------------------------------------------------------------------------


def test_records_round_trip_from_folder_and_registry(tmp_path: Path) -> None:
    originals = [record("Q-2", date="2026-10-15"), record("Q-1", ischemic=(Territory.LAD,))]
    folder = write_records(tmp_path / "records", originals)
    from_folder = read_records(folder)
    assert [r.study.id for r in from_folder] == ["Q-1", "Q-2"]  # sorted by date
    assert from_folder[0] == originals[1]
    registry = tmp_path / "registry.ndjson"
    registry.write_text(
        "".join(json.dumps(r.model_dump(mode="json")) + "\n\n" for r in originals), encoding="utf-8"
    )
    assert read_records(registry) == from_folder


def test_record_problems_are_located(tmp_path: Path) -> None:
    folder = write_records(tmp_path / "records", [record("Q-1")])
    (folder / "broken.record.json").write_text("{not json", encoding="utf-8")
    (folder / "copy.record.json").write_text(record_json(record("Q-1")), encoding="utf-8")
    (folder / "old.record.json").write_text(json.dumps({"schema_version": 0}), encoding="utf-8")
    with pytest.raises(InputErrors) as caught:
        read_records(folder)
    messages = [str(p) for p in caught.value.problems]
    assert any(m.startswith(f"{folder / 'broken.record.json'}: invalid JSON") for m in messages)
    assert any("schema_version 0 is not supported" in m for m in messages)
    assert any("study id 'Q-1' appears again" in m for m in messages)


def test_registry_problems_carry_line_numbers(tmp_path: Path) -> None:
    registry = tmp_path / "registry.ndjson"
    good = json.dumps(record("Q-1").model_dump(mode="json"))
    registry.write_text(good + "\n[1, 2]\n", encoding="utf-8")
    with pytest.raises(InputErrors, match=r"registry.ndjson: line 2: a record is a JSON object"):
        read_records(registry)


def test_empty_folder_is_an_error(tmp_path: Path) -> None:
    with pytest.raises(InputErrors, match="no records found"):
        read_records(tmp_path)


# --- the review --------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def lab_records() -> list[Analysis]:
    return [
        # LAD ischaemia, LAD 90 %: true positive per patient and in LAD.
        record("Q-01", ischemic=(Territory.LAD,), date="2026-01-05"),
        # Normal echo, RCA 85 %: false negative.
        record("Q-02", date="2026-01-12", reader="Dr Tomas Quellenberg"),
        # LCx ischaemia with a left-main stenosis: true positive in LCx, false negative in LAD.
        record("Q-03", ischemic=(Territory.LCX,), date="2026-02-01"),
        # Normal echo, only mild disease: true negative.
        record("Q-04", date="2026-02-10", protocol="vasodilator"),
        # RCA ischaemia, angiography normal: false positive.
        record("Q-05", ischemic=(Territory.RCA,), date="2026-03-03", reader="Dr Tomas Quellenberg"),
        # Inadequate stress, no ischaemia: non-diagnostic, listed not counted.
        record("Q-06", date="2026-03-09", adequate=False),
        # No angiography row at all: listed, not counted.
        record("Q-07", ischemic=(Territory.LAD,), date="2026-03-20", reader=None),
    ]


LAB_ANGIO = {
    "Q-01": angio("Q-01", LAD=90, RCA=30),
    "Q-02": angio("Q-02", RCA=85),
    "Q-03": angio("Q-03", LM=75),
    "Q-04": angio("Q-04", LAD=40, LCx=50),
    "Q-05": angio("Q-05"),  # a study with a row but no stenosis anywhere
    "Q-06": angio("Q-06", LCx=95),
    "Q-99": angio("Q-99", RCA=99),  # angiography of a study the lab has no record of
}


def test_hand_worked_review(lab_records: list[Analysis]) -> None:
    # Counted by hand from the comments of lab_records and LAB_ANGIO at 70 %:
    # per patient TP; FN Q-02; TN Q-04; FP Q-05.
    review = build_review(lab_records, LAB_ANGIO)
    p = review.per_patient
    assert (p.true_positive, p.false_positive, p.false_negative, p.true_negative) == (2, 1, 1, 1)
    assert (p.sensitivity.numerator, p.sensitivity.denominator) == (2, 3)
    assert (p.specificity.numerator, p.specificity.denominator) == (1, 2)
    # LAD: Q-01 TP, Q-03 FN (left main), others TN.
    lad = review.per_territory[Territory.LAD]
    assert (lad.true_positive, lad.false_positive, lad.false_negative, lad.true_negative) == (
        1,
        0,
        1,
        3,
    )
    # LCx: Q-03 TP via the left main; Q-04 50 % is below the threshold.
    lcx = review.per_territory[Territory.LCX]
    assert (lcx.true_positive, lcx.false_positive, lcx.false_negative, lcx.true_negative) == (
        1,
        0,
        0,
        4,
    )
    # RCA: Q-02 FN, Q-05 FP.
    rca = review.per_territory[Territory.RCA]
    assert (rca.true_positive, rca.false_positive, rca.false_negative, rca.true_negative) == (
        0,
        1,
        1,
        3,
    )


def test_missing_angiography_and_non_diagnostic_are_listed(lab_records: list[Analysis]) -> None:
    review = build_review(lab_records, LAB_ANGIO)
    assert [s.study_id for s in review.without_angiography] == ["Q-07"]
    assert [s.study_id for s in review.non_diagnostic] == ["Q-06"]
    assert review.non_diagnostic[0].status is DiagnosticStatus.NON_DIAGNOSTIC
    assert review.non_diagnostic[0].significant_vessels == [Vessel.LCX]
    assert review.without_angiography[0].significant_vessels is None
    assert review.angiography_without_record == ["Q-99"]
    c = review.counts
    assert (c.records, c.outside_period, c.without_angiography, c.non_diagnostic, c.analysed) == (
        7,
        0,
        1,
        1,
        5,
    )


def test_discordant_studies(lab_records: list[Analysis]) -> None:
    review = build_review(lab_records, LAB_ANGIO)
    found = {d.study_id: d for d in review.discordant}
    assert sorted(found) == ["Q-02", "Q-03", "Q-05"]
    assert found["Q-02"].patient_outcome is Outcome.FALSE_NEGATIVE
    assert found["Q-05"].patient_outcome is Outcome.FALSE_POSITIVE
    # Q-03 agrees per patient but misses the LAD territory fed by the left main.
    assert found["Q-03"].patient_outcome is Outcome.TRUE_POSITIVE
    assert [(c.territory, c.outcome) for c in found["Q-03"].discordant_territories] == [
        (Territory.LAD, Outcome.FALSE_NEGATIVE)
    ]
    assert found["Q-03"].discordant_territories[0].stenosis_percent == 75


def test_threshold_50_changes_the_tables(lab_records: list[Analysis]) -> None:
    # IAC 2021 allows 50 % or 70 %: at 50 % the LCx 50 % of Q-04 becomes significant.
    review = build_review(lab_records, LAB_ANGIO, stenosis_percent=50)
    assert review.per_patient.false_negative == 2
    assert review.per_territory[Territory.LCX].false_negative == 1


def test_separate_left_main_threshold(lab_records: list[Analysis]) -> None:
    # A lab may hold the left main to a lower threshold (≥ 50 % is common practice, from memory).
    records = [record("LM-1")]
    at_70 = build_review(records, {"LM-1": angio("LM-1", LM=60)})
    at_lm_50 = build_review(records, {"LM-1": angio("LM-1", LM=60)}, left_main_stenosis_percent=50)
    assert at_70.per_patient.true_negative == 1
    assert at_lm_50.per_patient.false_negative == 1
    assert at_lm_50.per_territory[Territory.RCA].true_negative == 1


def test_breakdown_by_reader_and_protocol(lab_records: list[Analysis]) -> None:
    review = build_review(lab_records, LAB_ANGIO)
    readers = {g.group: g for g in review.by_reader}
    assert list(readers) == ["Dr Ada Brightwater", "Dr Tomas Quellenberg"]
    assert readers["Dr Ada Brightwater"].studies == 3
    assert readers["Dr Tomas Quellenberg"].per_patient.false_negative == 1
    protocols = {g.group: g.studies for g in review.by_protocol}
    assert protocols == {"dobutamine": 4, "vasodilator": 1}


def test_date_filter(lab_records: list[Analysis]) -> None:
    review = build_review(
        lab_records, LAB_ANGIO, date_from=dt.date(2026, 2, 1), date_to=dt.date(2026, 3, 9)
    )
    assert review.counts.outside_period == 3  # before; Q-07 after
    assert review.counts.analysed == 3
    assert review.period.first_study_date == dt.date(2026, 2, 1)
    assert review.period.last_study_date == dt.date(2026, 3, 9)
    with pytest.raises(InputError, match="is after"):
        build_review(
            lab_records, LAB_ANGIO, date_from=dt.date(2026, 4, 1), date_to=dt.date(2026, 1, 1)
        )


@pytest.mark.parametrize("threshold", [0, -10, 101], ids=["zero", "negative", "above 100"])
def test_bad_threshold(lab_records: list[Analysis], threshold: float) -> None:
    with pytest.raises(InputError, match="stenosis threshold"):
        build_review(lab_records, LAB_ANGIO, stenosis_percent=threshold)


def test_review_json_keys(lab_records: list[Analysis]) -> None:
    data = json.loads(review_json(build_review(lab_records, LAB_ANGIO)))
    metric_keys = {"value", "numerator", "denominator", "ci_low", "ci_high"}
    for block in [data["per_patient"], *(data["per_territory"][t] for t in ("LAD", "LCx", "RCA"))]:
        for measure in ("sensitivity", "specificity", "ppv", "npv", "accuracy"):
            assert set(block[measure]) == metric_keys
    assert QualityReview.model_validate_json(review_json(build_review(lab_records, LAB_ANGIO)))


def test_run_review_from_files(tmp_path: Path, lab_records: list[Analysis]) -> None:
    folder = write_records(tmp_path / "records", lab_records)
    csv = tmp_path / "ANGIO.csv"
    csv.write_text(ANGIO_HEADER + "Q-01,LAD,90\nQ-02,RCA,85\n", encoding="utf-8")
    review = run_review(folder, csv)
    assert review.counts.analysed == 2
    assert review.counts.without_angiography == 5


def test_run_review_reports_problems_of_both_inputs(tmp_path: Path) -> None:
    csv = tmp_path / "ANGIO.csv"
    csv.write_text(ANGIO_HEADER + "Q-01,XYZ,90\n", encoding="utf-8")
    with pytest.raises(InputErrors) as caught:
        run_review(tmp_path / "nowhere", csv)
    messages = [str(p) for p in caught.value.problems]
    assert messages == [
        f"{tmp_path / 'nowhere'}: no such file or folder",
        f"{csv}: line 2: vessel 'XYZ' is not one of LAD, LCx, RCA, LM",
    ]


# A pool of records to combine freely; analysing once keeps the property test quick.
_POOL = [
    record(f"H-{i:02d}", ischemic=terr, adequate=adequate, date=f"2026-0{1 + i % 9}-1{i % 10}")
    for i, (terr, adequate) in enumerate(
        [
            ((), True),
            ((Territory.LAD,), True),
            ((Territory.LCX, Territory.RCA), True),
            ((), False),
            ((Territory.RCA,), True),
            ((Territory.LAD, Territory.LCX, Territory.RCA), True),
            ((), True),
            ((Territory.LCX,), True),
        ]
    )
] + [analyze(study_from_data(viability_study("H-V1")))]

_stenosis = st.dictionaries(
    st.sampled_from(list(Vessel)), st.floats(0, 100, allow_nan=False), max_size=4
)


@settings(max_examples=60, suppress_health_check=[HealthCheck.too_slow])
@given(
    chosen=st.lists(st.sampled_from(_POOL), unique_by=lambda r: r.study.id, max_size=8),
    angio_rows=st.dictionaries(st.sampled_from([r.study.id for r in _POOL] + ["X-1"]), _stenosis),
    threshold=st.sampled_from([50.0, 70.0]),
)
def test_every_record_is_accounted_for(
    chosen: list[Analysis], angio_rows: dict[str, dict[Vessel, float]], threshold: float
) -> None:
    references = {k: Angiography(study_id=k, stenosis_percent=v) for k, v in angio_rows.items()}
    review = build_review(chosen, references, stenosis_percent=threshold)
    c = review.counts
    assert (
        c.records
        == c.outside_period
        + c.without_angiography
        + c.viability_only
        + c.non_diagnostic
        + c.analysed
    )
    assert review.non_diagnostic_rate.studies == c.records - c.outside_period
    assert review.per_patient.total == c.analysed
    assert all(review.per_territory[t].total == c.analysed for t in Territory)
    assert sum(g.studies for g in review.by_reader) == c.analysed
    assert sum(g.per_patient.total for g in review.by_protocol) == c.analysed
    discordant = review.per_patient.false_positive + review.per_patient.false_negative
    assert (
        sum(
            d.patient_outcome in (Outcome.FALSE_POSITIVE, Outcome.FALSE_NEGATIVE)
            for d in review.discordant
        )
        == discordant
    )
    # Every per-territory interval holds its estimate.
    for t in Territory:
        sens = review.per_territory[t].sensitivity
        if sens.value is not None:
            assert sens.ci_low is not None and sens.ci_high is not None
            assert sens.ci_low <= sens.value <= sens.ci_high


# --- viability-only and non-diagnostic studies ------------------------------------------------


def test_review_class_of_each_kind_of_study() -> None:
    viability = analyze(study_from_data(viability_study("V-1")))
    assert review_class(viability) is ReviewClass.VIABILITY_ONLY
    # The same stages on a treadmill are an exercise test stopped early, not a viability study.
    treadmill = viability_study("V-2")
    treadmill["protocol"] = "treadmill"
    del treadmill["stages"]["low_dose"]["dose_ug_kg_min"]
    assert review_class(analyze(study_from_data(treadmill))) is ReviewClass.NON_DIAGNOSTIC
    # Inadequate stress without ischaemia is non-diagnostic (Ballal RS et al., 1997)...
    assert review_class(record("N-1", adequate=False)) is ReviewClass.NON_DIAGNOSTIC
    # ...but ischaemia shown at submaximal stress still answers the question.
    shown = record("N-2", adequate=False, ischemic=(Territory.LAD,))
    assert review_class(shown) is ReviewClass.DIAGNOSTIC
    assert review_class(record("N-3")) is ReviewClass.DIAGNOSTIC


def test_review_class_reads_the_records_own_status() -> None:
    # The record's conclusion.status is the one answer read: a study the analysis calls
    # non-diagnostic for another reason (a territory not assessable) moves with it.
    normal = record("N-4")
    unread = normal.model_copy(
        update={
            "conclusion": normal.conclusion.model_copy(
                update={"status": DiagnosticStatus.NON_DIAGNOSTIC}
            )
        }
    )
    assert review_class(normal) is ReviewClass.DIAGNOSTIC
    assert review_class(unread) is ReviewClass.NON_DIAGNOSTIC


@pytest.fixture(scope="module")
def mixed_records(lab_records: list[Analysis]) -> list[Analysis]:
    """The lab's records and a reader's viability-only and non-diagnostic studies."""
    extra = [
        analyze(study_from_data(viability_study("V-01"))),
        analyze(study_from_data(viability_study("V-02", reader="Dr Tomas Quellenberg"))),
        record("N-01", date="2026-02-03", adequate=False, reader="Dr Tomas Quellenberg"),
        record("N-02", date="2026-02-04", adequate=False, reader="Dr Tomas Quellenberg"),
        record("N-03", date="2026-02-05", adequate=False, reader=None),
    ]
    return [*lab_records, *extra]


MIXED_ANGIO = {**LAB_ANGIO, "V-01": angio("V-01", LAD=95), "N-01": angio("N-01", RCA=40)}


def test_viability_only_studies_stay_out_of_the_tables(mixed_records: list[Analysis]) -> None:
    review = build_review(mixed_records, MIXED_ANGIO)
    lab_only = build_review(mixed_records[:7], LAB_ANGIO)
    # The added studies change no accuracy figure: none is a diagnostic study with angiography.
    assert review.per_patient == lab_only.per_patient
    assert review.per_territory == lab_only.per_territory
    assert [s.study_id for s in review.viability_only] == ["V-01"]
    assert review.viability_only[0].significant_vessels == [Vessel.LAD]
    assert [s.study_id for s in review.non_diagnostic] == ["N-01", "Q-06"]
    assert [s.study_id for s in review.without_angiography] == ["N-02", "N-03", "V-02", "Q-07"]
    c = review.counts
    assert (c.records, c.without_angiography, c.viability_only, c.non_diagnostic, c.analysed) == (
        12,
        4,
        1,
        2,
        5,
    )


def test_non_diagnostic_rate_per_reader_matches_an_independent_count(
    mixed_records: list[Analysis],
) -> None:
    # Oracle: the record JSON tallied with pandas, intervals from statsmodels (Wilson).
    import pandas as pd

    rows = []
    for r in mixed_records:
        data = json.loads(record_json(r))
        stages = set(data["stages"])
        viability = (
            data["protocol"] == "dobutamine"
            and "low_dose" in stages
            and not stages & {"peak", "recovery"}
        )
        rows.append(
            {
                "reader": data["study"].get("reader") or "(none)",
                "viability": viability,
                "non_diagnostic": not viability
                and data["conclusion"]["status"] == "non_diagnostic",
            }
        )
    table = (
        pd.DataFrame(rows)
        .groupby("reader")
        .agg(
            studies=("viability", "size"),
            viability=("viability", "sum"),
            non_diagnostic=("non_diagnostic", "sum"),
        )
    )
    review = build_review(mixed_records, MIXED_ANGIO)
    ours = {r.reader or "(none)": r for r in review.non_diagnostic_by_reader}
    assert sorted(ours) == sorted(table.index)
    assert review.non_diagnostic_by_reader[-1].reader is None  # an unrecorded reader last
    for reader, expected in table.iterrows():
        got = ours[str(reader)]
        denominator = int(expected["studies"] - expected["viability"])
        assert (got.studies, got.viability_only) == (expected["studies"], expected["viability"])
        assert got.non_diagnostic.numerator == expected["non_diagnostic"]
        assert got.non_diagnostic.denominator == denominator
        low, high = proportion_confint(
            int(expected["non_diagnostic"]), denominator, alpha=0.05, method="wilson"
        )
        assert got.non_diagnostic.ci_low == pytest.approx(low, abs=1e-12)
        assert got.non_diagnostic.ci_high == pytest.approx(high, abs=1e-12)
    overall = review.non_diagnostic_rate
    assert (overall.studies, overall.viability_only) == (12, 2)
    assert (overall.non_diagnostic.numerator, overall.non_diagnostic.denominator) == (
        int(table["non_diagnostic"].sum()),
        10,
    )


def test_non_diagnostic_rate_counts_only_the_period(mixed_records: list[Analysis]) -> None:
    review = build_review(
        mixed_records, MIXED_ANGIO, date_from=dt.date(2026, 2, 1), date_to=dt.date(2026, 2, 28)
    )
    # February, V-01, V-02, N-01, N-02, N-03.
    assert review.non_diagnostic_rate.studies == 7
    assert review.non_diagnostic_rate.non_diagnostic.numerator == 3


# --- the quality PDF ---------------------------------------------------------------------------


def _pdf_text(data: bytes) -> tuple[int, str]:
    reader = PdfReader(io.BytesIO(data))
    return len(reader.pages), "\n".join(page.extract_text() for page in reader.pages)


def test_pdf_content_and_stability(tmp_path: Path, lab_records: list[Analysis]) -> None:
    review = build_review(lab_records, LAB_ANGIO)
    path = tmp_path / "qa.pdf"
    write_review_pdf(review, path)
    data = path.read_bytes()
    assert data == review_pdf_bytes(review)  # reportlab invariant mode: byte-stable
    pages, text = _pdf_text(data)
    assert pages == 2
    for expected in (
        "Stress echo quality review",
        "2026-01-05 to 2026-03-20",
        "Sensitivity",
        "67 %",  # per-patient sensitivity 2/3
        "Q-02",  # discordant
        "Without angiography (1): Q-07",
        "Non-diagnostic (1): Q-06",
        "Dr Tomas Quellenberg",
        "verification",
        "95 % interval",  # chart legend
        "Per patient",
    ):
        assert expected in text, expected


def test_pdf_shows_viability_only_and_the_non_diagnostic_rate_by_reader(
    mixed_records: list[Analysis],
) -> None:
    review = build_review(mixed_records, MIXED_ANGIO)
    pages, text = _pdf_text(review_pdf_bytes(review))
    flat = " ".join(text.split())  # table cells come out one per line
    assert pages == 2
    assert "viability-only 1, non-diagnostic 2" in flat
    assert "Viability-only (1): V-01" in text
    assert "Non-diagnostic (2): N-01, Q-06" in text
    assert "Non-diagnostic rate by reader" in text
    # Dr Quellenberg read, V-02, N-01 and N-02: 5 studies, 1 viability-only, and 2 of
    # the other 4 non-diagnostic.
    quellenberg = review.non_diagnostic_by_reader[1]
    assert quellenberg.reader == "Dr Tomas Quellenberg"
    low, high = proportion_confint(2, 4, alpha=0.05, method="wilson")
    row = f"Dr Tomas Quellenberg 5 1 50 % (2/4) {100 * low:.0f}–{100 * high:.0f} %"
    assert row in flat
    overall = review.non_diagnostic_rate.non_diagnostic
    assert f"All readers 12 2 {100 * overall.value:.0f} % ({overall.numerator}/10)" in flat


def test_pdf_escapes_free_text_and_stays_within_two_pages() -> None:
    # A hostile reader name must not break the paragraph markup; many discordant studies are cut.
    records = [
        record(f"M-{i:03d}", ischemic=(Territory.RCA,), reader="Dr <b>Bold</b> & Sons")
        for i in range(60)
    ]
    references = {r.study.id: angio(r.study.id) for r in records}  # all false positive
    review = build_review(records, references)
    pages, text = _pdf_text(review_pdf_bytes(review))
    assert pages <= 2
    assert "Dr <b>Bold</b> & Sons" in text
    assert "and 42 more in the review JSON" in text


def test_pdf_names_a_reader_field_the_font_cannot_show(caplog: pytest.LogCaptureFixture) -> None:
    # A reader name in a script the body font lacks (CJK) prints as replacement marks: the field is
    # named in one warning (not the name itself), and the PDF still renders within two pages.
    records = [
        record("K-1", ischemic=(Territory.RCA,), reader="Dr 佐藤 Vell"),  # invented
        record("K-2", reader="Dr Tomas Quellenberg"),
    ]
    review = build_review(records, {r.study.id: angio(r.study.id) for r in records})
    with caplog.at_level(logging.WARNING, logger="reporting"):
        pages, text = _pdf_text(review_pdf_bytes(review))
    assert pages <= 2 and "Vell" in text
    lost = [r.getMessage() for r in caplog.records if r.levelno == logging.WARNING]
    assert len(lost) == 1, lost
    assert "study.reader" in lost[0] and "2 characters" in lost[0] and "佐藤" not in lost[0]


def test_pdf_with_agreement_figures(lab_records: list[Analysis]) -> None:
    from reporting.qa.agreement import build_agreement

    agreement = build_agreement(lab_records, lab_records)
    pages, text = _pdf_text(review_pdf_bytes(build_review(lab_records, LAB_ANGIO), agreement))
    assert pages == 2
    assert "Reader agreement" in text
    assert "almost perfect" in text


def test_pdf_without_any_analysed_study() -> None:
    review = build_review([record("E-1")], {})
    pages, text = _pdf_text(review_pdf_bytes(review))
    assert pages <= 2
    assert "n/a" in text


def test_deidentified_records_keep_their_year(lab_records: list[Analysis]) -> None:
    # A de-identified record keeps only the year (45 CFR 164.514(b)(2)): with a period set it counts
    # only when its whole year lies inside, and it is never dropped without being counted.
    original = record("D-1", ischemic=(Territory.LAD,), date="2026-06-15")
    undated = original.model_copy(
        update={"study": original.study.model_copy(update={"date": None})}
    )
    references = {"D-1": angio("D-1", LAD=90)}
    whole_year = build_review(
        [undated], references, date_from=dt.date(2026, 1, 1), date_to=dt.date(2026, 12, 31)
    )
    assert whole_year.counts.analysed == 1
    part_year = build_review([undated], references, date_from=dt.date(2026, 6, 1))
    assert (part_year.counts.outside_period, part_year.counts.analysed) == (1, 0)
    missed = build_review([undated], {})
    assert missed.without_angiography[0].date is None
    assert missed.without_angiography[0].year == 2026


def test_public_api_names_resolve() -> None:
    import reporting.qa as qa

    for name in qa.__all__:
        assert getattr(qa, name) is not None, name
