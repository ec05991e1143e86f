"""Analysis-ready tables: columns, dtypes, streaming and round-trips through pandas (invented studies)."""

from __future__ import annotations

from pathlib import Path

import pandas as pd  # type: ignore[import-untyped, unused-ignore]
import pytest

from reporting.analysis import analyze_file
from reporting.demo import demo_study_names
from reporting.export import tables
from reporting.model import Stage
from reporting.results import Analysis

DEMO = Path(__file__).parent.parent / "reporting" / "data" / "demo"


@pytest.fixture(scope="module")
def analyses() -> list[Analysis]:
    return [analyze_file(DEMO / name) for name in demo_study_names()]


def expected_dtype(kind: str | tuple[str, tuple[str, ...]]) -> object:
    return (
        pd.CategoricalDtype(list(kind[1]))
        if isinstance(kind, tuple)
        else pd.api.types.pandas_dtype(kind)
    )


def write(outdir: Path, analyses: list[Analysis], chunk: int, parquet: bool = False) -> list[Path]:
    with tables.TableWriter(outdir, parquet=parquet) as writer:
        for i in range(0, len(analyses), chunk):
            part = analyses[i : i + chunk]
            writer.append(
                [tables.study_row(a) for a in part],
                [row for a in part for row in tables.segment_rows(a)],
            )
        return writer.commit()


def test_one_row_per_study_with_the_declared_dtypes(analyses: list[Analysis]) -> None:
    frame = tables.studies_frame([tables.study_row(a) for a in analyses])
    assert list(frame.columns) == list(tables.STUDY_COLUMNS)
    assert len(frame) == len(analyses)
    for name, kind in tables.STUDY_COLUMNS.items():
        assert frame[name].dtype == expected_dtype(kind), name


def test_study_row_values(analyses: list[Analysis]) -> None:
    frame = tables.studies_frame([tables.study_row(a) for a in analyses]).set_index("study_id")
    for a in analyses:
        row = frame.loc[a.study.id]
        for stage in Stage:
            value = row[f"wmsi_{stage}"]
            if stage in a.wmsi:
                assert value == a.wmsi[stage]  # exact: the record keeps full precision
            else:
                assert pd.isna(value)
        assert bool(row["ischemia"]) is a.conclusion.ischemia
        territories = ";".join(a.conclusion.ischemic_territories)
        if territories:
            assert row["ischemic_territories"] == territories
        else:
            assert pd.isna(row["ischemic_territories"])  # an empty list is null in the tables
        assert bool(row["stress_adequate"]) is a.stress.adequate
        assert row["year"] == a.study.year
        assert row["high_risk_finding_count"] == len(a.conclusion.high_risk_findings)


def test_segments_long_form_is_study_by_stage_by_segment(analyses: list[Analysis]) -> None:
    rows = [row for a in analyses for row in tables.segment_rows(a)]
    frame = tables.segments_frame(rows)
    assert list(frame.columns) == list(tables.SEGMENT_COLUMNS)
    assert len(frame) == sum(len(a.stages) * len(a.segments) for a in analyses)
    for name, kind in tables.SEGMENT_COLUMNS.items():
        assert frame[name].dtype == expected_dtype(kind), name
    first = analyses[0]
    mine = frame[frame["study_id"] == first.study.id]
    assert list(mine["stage"].unique()) == [s.value for s in first.stages]
    peak = mine[mine["stage"] == "peak"].set_index("segment")
    for seg in first.segments:
        expected = seg.wall_motion.get(Stage.PEAK)
        got = peak.loc[seg.number, "wall_motion"]
        assert (pd.isna(got) and expected is None) or got == expected
        assert peak.loc[seg.number, "territory"] == seg.territory.value
        assert peak.loc[seg.number, "response"] == seg.response.value


def test_csv_round_trip_keeps_values_and_dtypes(analyses: list[Analysis], tmp_path: Path) -> None:
    write(tmp_path, analyses, chunk=2)
    studies = tables.read_studies_csv(tmp_path / tables.STUDIES_CSV)
    segments = tables.read_segments_csv(tmp_path / tables.SEGMENTS_CSV)
    pd.testing.assert_frame_equal(
        studies, tables.studies_frame([tables.study_row(a) for a in analyses])
    )
    pd.testing.assert_frame_equal(
        segments, tables.segments_frame([r for a in analyses for r in tables.segment_rows(a)])
    )


@pytest.mark.skipif(not tables.parquet_available(), reason="pyarrow not installed")
def test_parquet_round_trip_keeps_values_and_dtypes(
    analyses: list[Analysis], tmp_path: Path
) -> None:
    written = write(tmp_path, analyses, chunk=2, parquet=True)
    assert tmp_path / tables.STUDIES_PARQUET in written
    studies = pd.read_parquet(tmp_path / tables.STUDIES_PARQUET)
    segments = pd.read_parquet(tmp_path / tables.SEGMENTS_PARQUET)
    pd.testing.assert_frame_equal(
        studies, tables.studies_frame([tables.study_row(a) for a in analyses])
    )
    pd.testing.assert_frame_equal(
        segments, tables.segments_frame([r for a in analyses for r in tables.segment_rows(a)])
    )


def test_chunked_csv_equals_one_chunk(analyses: list[Analysis], tmp_path: Path) -> None:
    write(tmp_path / "one", analyses, chunk=len(analyses))
    write(tmp_path / "many", analyses, chunk=1)
    for name in (tables.STUDIES_CSV, tables.SEGMENTS_CSV):
        assert (tmp_path / "one" / name).read_bytes() == (tmp_path / "many" / name).read_bytes()


def test_nothing_appears_before_commit_and_abort_cleans_up(
    analyses: list[Analysis], tmp_path: Path
) -> None:
    with pytest.raises(RuntimeError), tables.TableWriter(tmp_path, parquet=True) as writer:
        writer.append([tables.study_row(analyses[0])], tables.segment_rows(analyses[0]))
        assert not (tmp_path / tables.STUDIES_CSV).exists()
        raise RuntimeError("interrupted")
    assert list(tmp_path.iterdir()) == []


def test_deidentified_rows_have_no_date_but_the_year(analyses: list[Analysis]) -> None:
    from reporting.deidentify import deidentify

    row = tables.studies_frame([tables.study_row(deidentify(analyses[0], b"k" * 32))]).iloc[0]
    assert pd.isna(row["date"]) and row["year"] == analyses[0].study.year
    assert row["study_id"].startswith("S-") and bool(row["deidentified"])


def test_perfusion_columns_follow_the_record_lists() -> None:
    # CONTRACT: reversible = normal at rest and abnormal at peak; a defect abnormal at rest and
    # worse at peak (segment 2: 2 -> 3) is partially reversible, in its own column, never counted
    # as reversible (Porter TR et al., JASE 2018: reversible = normal at rest, abnormal at stress).
    from conftest import NORMAL_17, analysed, stages

    s = stages(rest=NORMAL_17, peak=NORMAL_17)
    s["rest"]["perfusion"] = "121111 111111 1111 1"
    s["peak"]["perfusion"] = "131111 211111 1111 1"
    a = analysed(stages=s, contrast={"administration": "infusion", "imaging_mi": 0.12})
    assert (a.perfusion.reversible_segments, a.perfusion.partially_reversible_segments) == (
        [7],
        [2],
    )
    row = dict(zip(tables.STUDY_COLUMNS, tables.study_row(a), strict=True))
    assert row["reversible_perfusion_segments"] == "7"
    assert row["partially_reversible_perfusion_segments"] == "2"
