"""Reader agreement: Cohen's kappa (unweighted, linear, quadratic), Landis & Koch bands, matching."""

from __future__ import annotations

import json
import math
import warnings
from pathlib import Path
from typing import Any

import pytest
from hypothesis import given
from hypothesis import strategies as st
from sklearn.metrics import cohen_kappa_score  # type: ignore[import-untyped]

from reporting.analysis import analyze
from reporting.errors import InputError, InputErrors
from reporting.export.record import record_json
from reporting.load import study_from_data
from reporting.model import Stage
from reporting.qa.agreement import agreement_json, binary_agreement, build_agreement, run_agreement
from reporting.qa.kappa import (
    AgreementLabel,
    Weighting,
    cohen_kappa,
    landis_koch,
    proportion_agreeing,
)
from reporting.results import Analysis, DiagnosticStatus
from reporting.segments import Territory

SCALE = [1, 2, 3, 4]
SKLEARN_WEIGHTS: dict[Weighting, str | None] = {
    Weighting.NONE: None,
    Weighting.LINEAR: "linear",
    Weighting.QUADRATIC: "quadratic",
}


def sklearn_kappa(pairs: list[tuple[int, int]], weighting: Weighting, labels: list[Any]) -> float:
    # Reference library: scikit-learn cohen_kappa_score; labels fix the category list and order.
    a = [p[0] for p in pairs]
    b = [p[1] for p in pairs]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return float(cohen_kappa_score(a, b, labels=labels, weights=SKLEARN_WEIGHTS[weighting]))


# --- kappa ---------------------------------------------------------------------------------------


def test_hand_worked_unweighted_kappa() -> None:
    # Worked by hand: 50 studies; both yes 20, A only 5, B only 10, both no 15.
    # p_o = 35/50 = 0.70; p_e = 0.5 × 0.6 + 0.5 × 0.4 = 0.50; kappa = (0.70 − 0.50) / 0.50 = 0.40.
    pairs = [(True, True)] * 20 + [(True, False)] * 5 + [(False, True)] * 10 + [(False, False)] * 15
    assert cohen_kappa(pairs, (False, True)) == pytest.approx(0.40)
    b = binary_agreement(pairs)
    assert (b.both_positive, b.positive_a_only, b.positive_b_only, b.both_negative) == (
        20,
        5,
        10,
        15,
    )
    assert b.percent_agreement == pytest.approx(70.0)
    assert b.kappa.label is AgreementLabel.FAIR  # 0.21–0.40, Landis & Koch 1977


def test_hand_worked_linear_kappa() -> None:
    # Worked by hand on a 3-point scale, linear weights |i − j| (Cohen 1968):
    # pairs (1,1) (2,2) (3,3) (1,2) (2,3) (3,1): observed disagreement = (1 + 1 + 2) / 6 = 2/3;
    # both readers use each score twice, so expected disagreement = Σ|i−j| / 9 = 8/9;
    # kappa = 1 − (2/3) / (8/9) = 0.25.
    pairs = [(1, 1), (2, 2), (3, 3), (1, 2), (2, 3), (3, 1)]
    assert cohen_kappa(pairs, [1, 2, 3], Weighting.LINEAR) == pytest.approx(0.25)


@pytest.mark.parametrize("weighting", list(Weighting), ids=[w.value for w in Weighting])
@pytest.mark.parametrize(
    "pairs",
    [
        [(1, 1), (1, 2), (2, 2), (3, 2), (4, 4), (1, 1), (2, 3), (3, 3)],
        [(1, 4), (4, 1), (2, 2), (3, 3)],
        [(1, 1)] * 30 + [(2, 2)] * 3 + [(1, 2)] * 2 + [(2, 1)],  # mostly normal segments
        [(1, 2), (2, 1)],  # no agreement at all: negative kappa
    ],
    ids=["mixed", "opposite extremes", "mostly normal", "never agree"],
)
def test_kappa_matches_scikit_learn(pairs: list[tuple[int, int]], weighting: Weighting) -> None:
    assert cohen_kappa(pairs, SCALE, weighting) == pytest.approx(
        sklearn_kappa(pairs, weighting, SCALE), abs=1e-12
    )


@given(
    pairs=st.lists(st.tuples(st.integers(1, 4), st.integers(1, 4)), min_size=1, max_size=60),
    weighting=st.sampled_from(list(Weighting)),
)
def test_kappa_property_against_scikit_learn(
    pairs: list[tuple[int, int]], weighting: Weighting
) -> None:
    ours = cohen_kappa(pairs, SCALE, weighting)
    reference = sklearn_kappa(pairs, weighting, SCALE)
    if ours is None:
        assert math.isnan(reference)  # scikit-learn gives NaN where kappa is undefined
    else:
        assert ours == pytest.approx(reference, abs=1e-9)
        assert -1.0 - 1e-9 <= ours <= 1.0 + 1e-9


@given(pairs=st.lists(st.tuples(st.booleans(), st.booleans()), min_size=1, max_size=60))
def test_binary_kappa_property(pairs: list[tuple[bool, bool]]) -> None:
    ours = cohen_kappa(pairs, (False, True))
    reference = sklearn_kappa(pairs, Weighting.NONE, [False, True])  # type: ignore[arg-type]
    if ours is None:
        assert math.isnan(reference)
    else:
        assert ours == pytest.approx(reference, abs=1e-9)
    # Perfect agreement gives kappa 1 whenever kappa is defined.
    if all(a == b for a, b in pairs) and ours is not None:
        assert ours == pytest.approx(1.0)


def test_kappa_undefined_without_variation() -> None:
    # Both readers score every segment normal: chance predicts perfect agreement, kappa undefined.
    assert cohen_kappa([(1, 1)] * 17, SCALE, Weighting.LINEAR) is None
    assert cohen_kappa([], SCALE) is None
    assert proportion_agreeing([(1, 1)] * 17) == 1.0


def test_kappa_refuses_scores_outside_the_scale() -> None:
    with pytest.raises(ValueError, match="outside the categories"):
        cohen_kappa([(1, 5)], SCALE)


@pytest.mark.parametrize(
    ("kappa", "label"),
    [
        (-0.05, AgreementLabel.POOR),
        (0.0, AgreementLabel.SLIGHT),
        (0.20, AgreementLabel.SLIGHT),
        (0.21, AgreementLabel.FAIR),
        (0.40, AgreementLabel.FAIR),
        (0.41, AgreementLabel.MODERATE),
        (0.61, AgreementLabel.SUBSTANTIAL),
        (0.80, AgreementLabel.SUBSTANTIAL),
        (0.81, AgreementLabel.ALMOST_PERFECT),
        (1.0, AgreementLabel.ALMOST_PERFECT),
    ],
)
def test_landis_koch_bands(kappa: float, label: AgreementLabel) -> None:
    # Landis JR, Koch GG. Biometrics 1977;33:159–174: < 0 poor, 0–0.20 slight, 0.21–0.40 fair,
    # 0.41–0.60 moderate, 0.61–0.80 substantial, 0.81–1.00 almost perfect.
    assert landis_koch(kappa) is label


# --- two readers of the same studies -----------------------------------------------------------

NORMAL = "111111 111111 1111 1"


def reading(
    study_id: str, peak: str, *, reader: str, rest: str = NORMAL, segment_model: int = 17
) -> Analysis:
    data = {
        "schema_version": 1,
        "study": {"id": study_id, "date": "2026-05-04", "reader": reader},
        "patient": {"age_years": 60},
        "protocol": "dobutamine",
        "segment_model": segment_model,
        "stages": {
            "rest": {"heart_rate_bpm": 70, "systolic_bp_mmhg": 120, "wall_motion": rest},
            "peak": {"heart_rate_bpm": 150, "systolic_bp_mmhg": 140, "wall_motion": peak},
        },
    }
    return analyze(study_from_data(data))


A = "Dr Linnea Oakhurst"
B = "Dr Rafael Thornbury"


@pytest.fixture(scope="module")
def readers() -> tuple[list[Analysis], list[Analysis]]:
    set_a = [
        reading("R-1", NORMAL, reader=A),
        reading("R-2", "111111 221111 1111 1", reader=A),  # LAD ischaemia (7, 8)
        reading("R-3", "112211 111111 1111 1", reader=A),  # RCA ischaemia (3, 4)
        reading("R-4", NORMAL, reader=A),  # read by A only
        reading("R-6", "111111 111111 1111", reader=A, rest="111111 111111 1111", segment_model=16),
    ]
    set_b = [
        reading("R-1", NORMAL, reader=B),
        reading("R-2", "111111 231111 1111 1", reader=B),  # LAD, one segment a grade worse
        reading("R-3", NORMAL, reader=B),  # B sees no ischaemia
        reading("R-5", NORMAL, reader=B),  # read by B only
        reading("R-6", NORMAL, reader=B),  # B used the 17-segment model
    ]
    return set_a, set_b


def test_matching_and_unmatched_ids(readers: tuple[list[Analysis], list[Analysis]]) -> None:
    result = build_agreement(*readers)
    assert result.matched_studies == 4
    assert result.only_in_a == ["R-4"]
    assert result.only_in_b == ["R-5"]
    assert result.segment_model_differs == ["R-6"]
    assert result.readers_a == [A] and result.readers_b == [B]


def test_segment_level_pairs_and_kappa(readers: tuple[list[Analysis], list[Analysis]]) -> None:
    set_a, set_b = readers
    result = build_agreement(set_a, set_b)
    peak = result.wall_motion[Stage.PEAK]
    # R-3 (R-6 left out: different segment models): 3 × 17 peak segments.
    assert (peak.studies, peak.pairs, peak.scale_max) == (3, 51, 4)
    expected: list[tuple[int, int]] = []
    for sid in ("R-1", "R-2", "R-3"):
        a = next(r for r in set_a if r.study.id == sid)
        b = next(r for r in set_b if r.study.id == sid)
        for sa, sb in zip(a.segments, b.segments, strict=True):
            expected.append((sa.wall_motion[Stage.PEAK] or 0, sb.wall_motion[Stage.PEAK] or 0))
    for weighting, statistic in (
        (Weighting.LINEAR, peak.linear),
        (Weighting.QUADRATIC, peak.quadratic),
    ):
        assert statistic.value == pytest.approx(sklearn_kappa(expected, weighting, SCALE))
        assert statistic.label is landis_koch(statistic.value or 0.0)
    # Disagreements at peak: R-2 segment 8 (2 vs 3), R-3 segments 3 and 4 (2 vs 1).
    assert peak.percent_agreement == pytest.approx(100 * 48 / 51)
    assert peak.percent_within_one_grade == pytest.approx(100.0)
    # At rest every segment is normal for both readers: kappa undefined, agreement 100 %.
    rest = result.wall_motion[Stage.REST]
    assert rest.linear.value is None and rest.linear.label is None
    assert rest.percent_agreement == 100.0


def test_ischaemia_agreement_and_disagreements(
    readers: tuple[list[Analysis], list[Analysis]],
) -> None:
    result = build_agreement(*readers)
    patient = result.ischemia_per_patient
    # R-1 both no, R-2 both yes, R-3 A only, R-6 both no.
    assert (
        patient.both_positive,
        patient.both_negative,
        patient.positive_a_only,
        patient.positive_b_only,
    ) == (1, 2, 1, 0)
    assert patient.kappa.value == pytest.approx(
        sklearn_kappa([(0, 0), (1, 1), (1, 0), (0, 0)], Weighting.NONE, [0, 1])
    )
    rca = result.ischemia_per_territory[Territory.RCA]
    assert rca.positive_a_only == 1
    assert result.ischemia_all_territories.pairs == 12
    assert [d.study_id for d in result.conclusion_disagreements] == ["R-3"]
    d = result.conclusion_disagreements[0]
    assert (d.status_a, d.status_b) == (DiagnosticStatus.ISCHEMIA, DiagnosticStatus.NO_ISCHEMIA)
    assert d.territories_a == [Territory.RCA] and d.territories_b == []


def test_no_common_studies_is_an_error(readers: tuple[list[Analysis], list[Analysis]]) -> None:
    with pytest.raises(InputError, match="no study id appears in both"):
        build_agreement(readers[0][:1], readers[1][3:4])


def test_run_agreement_from_folders_and_json(
    tmp_path: Path, readers: tuple[list[Analysis], list[Analysis]]
) -> None:
    folders = []
    for name, records in zip(("a", "b"), readers, strict=True):
        folder = tmp_path / name
        folder.mkdir()
        for r in records:
            (folder / f"{r.study.id}.record.json").write_text(record_json(r), encoding="utf-8")
        folders.append(folder)
    result = run_agreement(*folders)
    assert result == build_agreement(*readers)
    data = json.loads(agreement_json(result))
    assert set(data["wall_motion"]) == {"rest", "peak"}
    assert set(data["ischemia_per_territory"]) == {"LAD", "LCx", "RCA"}
    assert set(data["wall_motion"]["peak"]["linear"]) == {"value", "label"}


def test_run_agreement_reports_both_sides(tmp_path: Path) -> None:
    with pytest.raises(InputErrors) as caught:
        run_agreement(tmp_path / "a", tmp_path / "b")
    assert [str(p) for p in caught.value.problems] == [
        f"{tmp_path / 'a'}: no such file or folder",
        f"{tmp_path / 'b'}: no such file or folder",
    ]


# --- the agreement PDF ---------------------------------------------------------------------------


def _pdf(data: bytes) -> tuple[int, str]:
    import io

    from pypdf import PdfReader

    pages = PdfReader(io.BytesIO(data)).pages
    # Table cells come out one per line: compare on text with the whitespace collapsed.
    return len(pages), " ".join(" ".join(p.extract_text() for p in pages).split())


def test_agreement_pdf_prints_the_kappas_scikit_learn_computes(
    readers: tuple[list[Analysis], list[Analysis]],
) -> None:
    from reporting.qa.pdf import agreement_pdf_bytes

    set_a, set_b = readers
    result = build_agreement(set_a, set_b)
    data = agreement_pdf_bytes(result)
    assert data == agreement_pdf_bytes(result)  # reportlab invariant mode: byte-stable
    pages, text = _pdf(data)
    assert pages == 1
    # Peak wall motion of, recomputed from the records with scikit-learn.
    pairs: list[tuple[int, int]] = []
    for sid in ("R-1", "R-2", "R-3"):
        a = next(r for r in set_a if r.study.id == sid)
        b = next(r for r in set_b if r.study.id == sid)
        pairs += [
            (sa.wall_motion[Stage.PEAK] or 0, sb.wall_motion[Stage.PEAK] or 0)
            for sa, sb in zip(a.segments, b.segments, strict=True)
        ]
    kappas = [sklearn_kappa(pairs, w, SCALE) for w in Weighting]
    words = [landis_koch(k).value.replace("_", " ") for k in kappas]
    row = f"Wall motion, peak 51 {100 * 48 / 51:.0f} % " + " ".join(
        f"{k:.2f} {w}" for k, w in zip(kappas, words, strict=True)
    )
    assert row in text
    # Ischaemia per patient: R-1 no/no, R-2 yes/yes, R-3 yes/no, R-6 no/no.
    patient = sklearn_kappa([(0, 0), (1, 1), (1, 0), (0, 0)], Weighting.NONE, [0, 1])
    assert f"Ischaemia, per patient 4 75 % {patient:.2f} {landis_koch(patient).value}" in text
    assert f"R-3 {A} {B} ischaemia no ischaemia RCA / none" in text
    assert "Read in set A only (1): R-4" in text and "Read in set B only (1): R-5" in text
    assert "Different segment models, left out of the wall-motion kappas (1): R-6" in text
    assert "Hoffmann R et al." in text  # sources
    assert "Kappa depends on how common each score is" in text  # cautions


def test_agreement_pdf_escapes_names_and_stays_within_two_pages() -> None:
    # A hostile reader name must not break the markup; 80 disagreements are cut to fit.
    hostile = "Dr <i>Slant</i> & Co"
    set_a = [reading(f"D-{i:03d}", "112211 111111 1111 1", reader=hostile) for i in range(80)]
    set_b = [reading(f"D-{i:03d}", NORMAL, reader=B) for i in range(80)]
    from reporting.qa.pdf import agreement_pdf_bytes

    pages, text = _pdf(agreement_pdf_bytes(build_agreement(set_a, set_b)))
    assert pages <= 2
    assert hostile in text
    assert "more in the agreement JSON" in text


def test_agreement_command_writes_json_and_pdf(
    tmp_path: Path, readers: tuple[list[Analysis], list[Analysis]]
) -> None:
    from click.testing import CliRunner

    from reporting.cli import main

    folders = []
    for name, records in zip(("a", "b"), readers, strict=True):
        folder = tmp_path / name
        folder.mkdir()
        for r in records:
            (folder / f"{r.study.id}.record.json").write_text(record_json(r), encoding="utf-8")
        folders.append(str(folder))
    pdf, out = tmp_path / "agreement.pdf", tmp_path / "agreement.json"
    result = CliRunner().invoke(main, ["agreement", *folders, "--pdf", str(pdf), "-o", str(out)])
    assert result.exit_code == 0, result.output
    assert json.loads(out.read_text(encoding="utf-8"))["matched_studies"] == 4
    pages, text = _pdf(pdf.read_bytes())
    assert pages == 1 and "Stress echo reader agreement" in text
    assert f"Wrote {pdf}" in result.stderr
    # Without -o the JSON goes to stdout and the PDF is still written.
    pdf.unlink()
    result = CliRunner().invoke(main, ["agreement", *folders, "--pdf", str(pdf)])
    assert result.exit_code == 0 and json.loads(result.stdout)["matched_studies"] == 4
    assert pdf.is_file()


def test_agreement_command_with_bad_records_writes_nothing(tmp_path: Path) -> None:
    from click.testing import CliRunner

    from reporting.cli import main

    (tmp_path / "a").mkdir()
    # Broken JSON in reader A's only record: nothing can be compared.
    (tmp_path / "a" / "R-1.record.json").write_text("{", encoding="utf-8")
    pdf = tmp_path / "agreement.pdf"
    result = CliRunner().invoke(
        main, ["agreement", str(tmp_path / "a"), str(tmp_path / "b"), "--pdf", str(pdf)]
    )
    assert result.exit_code == 1
    assert result.stderr.splitlines() == [
        f"Error: {tmp_path / 'a' / 'R-1.record.json'}: invalid JSON: Expecting property name "
        "enclosed in double quotes (column 2)",
        f"Error: {tmp_path / 'b'}: no such file or folder",
    ]
    assert not pdf.exists()
