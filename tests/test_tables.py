"""Analysis-ready tables: columns, dtypes, streaming and round-trips through pandas (invented studies)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd  # type: ignore[import-untyped, unused-ignore]
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

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


# The streamed writer cleans and writes rows itself instead of building a DataFrame per chunk. Its
# bytes are checked against the DataFrame route it replaced (pandas and pyarrow as the oracle):
# DataFrame.from_records(...).astype(dtypes).to_csv(...) and Table.from_pandas(...) per chunk.


def dataframe_route(outdir: Path, chunks: list[tuple[list[tables.Row], list[tables.Row]]]) -> None:
    outdir.mkdir(parents=True)
    named = (
        (tables.STUDIES_CSV, tables.STUDIES_PARQUET, tables.STUDY_COLUMNS, 0),
        (tables.SEGMENTS_CSV, tables.SEGMENTS_PARQUET, tables.SEGMENT_COLUMNS, 1),
    )
    for csv_name, parquet_name, columns, part in named:
        write_dataframes(
            outdir / csv_name, outdir / parquet_name, columns, [c[part] for c in chunks]
        )


def write_dataframes(
    csv_path: Path,
    parquet_path: Path | None,
    columns: dict[str, str | tuple[str, tuple[str, ...]]],
    chunks: list[list[tables.Row]],
) -> None:
    import pyarrow as pa  # type: ignore[import-untyped, unused-ignore]
    import pyarrow.parquet as pq  # type: ignore[import-untyped, unused-ignore]

    dtypes = {
        name: pd.CategoricalDtype(list(kind[1])) if isinstance(kind, tuple) else kind
        for name, kind in columns.items()
    }
    schema = pa.Schema.from_pandas(
        pd.DataFrame({n: pd.Series([], dtype=d) for n, d in dtypes.items()}), preserve_index=False
    )
    with csv_path.open("w", encoding="utf-8", newline="") as text:
        text.write(",".join(columns) + "\n")
        parquet = (
            pq.ParquetWriter(parquet_path, schema, compression="zstd") if parquet_path else None
        )
        for rows in chunks:
            if not rows:
                continue
            frame = pd.DataFrame.from_records(list(rows), columns=list(columns)).astype(dtypes)
            frame.to_csv(text, header=False, index=False, lineterminator="\n")
            if parquet is not None:
                parquet.write_table(
                    pa.Table.from_pandas(frame, schema=schema, preserve_index=False)
                )
        if parquet is not None:
            parquet.close()


@pytest.mark.skipif(not tables.parquet_available(), reason="pyarrow not installed")
def test_streamed_tables_are_the_dataframe_routes_bytes(
    analyses: list[Analysis], tmp_path: Path
) -> None:
    from reporting.deidentify import deidentify

    studies = analyses + [deidentify(a, b"k" * 32) for a in analyses]
    chunks = [
        ([tables.study_row(a) for a in part], [r for a in part for r in tables.segment_rows(a)])
        for part in (studies[i : i + 3] for i in range(0, len(studies), 3))
    ]
    dataframe_route(tmp_path / "pandas", chunks)
    (tmp_path / "streamed").mkdir()
    with tables.TableWriter(tmp_path / "streamed", parquet=True) as writer:
        for study_rows, segment_rows in chunks:
            writer.append(study_rows, segment_rows)
        writer.commit()
    for name in (
        tables.STUDIES_CSV,
        tables.SEGMENTS_CSV,
        tables.STUDIES_PARQUET,
        tables.SEGMENTS_PARQUET,
    ):
        assert (tmp_path / "streamed" / name).read_bytes() == (
            tmp_path / "pandas" / name
        ).read_bytes(), name


# Every dtype the tables use, with the values a row may hold for it: missing values, NaN, ints in a
# float column, text that needs CSV quoting, a value outside a categorical's categories.
ANY_COLUMNS: dict[str, str | tuple[str, tuple[str, ...]]] = {
    "text": "string",
    "whole": "Int64",
    "real": "Float64",
    "flag": "boolean",
    "kind": ("category", ("rest", "low_dose", "peak")),
}
_CELLS = {
    "text": st.none()
    | st.just(float("nan"))
    | st.text(st.characters(exclude_categories=["Cs"]), max_size=12),
    # Within ±2**53: beyond, the DataFrame route itself rounds (from_records reads a column of ints
    # and None as float64), while the streamed writer keeps every int.
    "whole": st.none()
    | st.just(float("nan"))
    | st.booleans()
    | st.integers(-(2**53), 2**53)
    | st.integers(-(2**40), 2**40).map(float),
    "real": st.none()
    | st.floats(allow_nan=True, allow_infinity=True)
    | st.floats(allow_nan=True, width=32).map(np.float32)
    | st.integers(-(2**53), 2**53),
    "flag": st.none() | st.just(float("nan")) | st.booleans(),
    "kind": st.none() | st.sampled_from(["rest", "low_dose", "peak", "Peak", "recovery", ""]),
}
ANY_ROW = st.tuples(*(_CELLS[name] for name in ANY_COLUMNS))


@pytest.mark.skipif(not tables.parquet_available(), reason="pyarrow not installed")
# pandas warns that it will refuse a value outside the categories one day; today it stores a
# missing value, and so does the streamed writer (the analysis never makes such a value).
@pytest.mark.filterwarnings("ignore:Constructing a Categorical with a dtype")
@settings(
    max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(chunks=st.lists(st.lists(ANY_ROW, max_size=6), min_size=1, max_size=4))
def test_streamed_table_writes_what_pandas_writes_for_any_values(
    chunks: list[list[tables.Row]], tmp_path_factory: pytest.TempPathFactory
) -> None:
    import pyarrow.parquet as pq

    folder = tmp_path_factory.mktemp("any")
    write_dataframes(folder / "pandas.csv", folder / "pandas.parquet", ANY_COLUMNS, chunks)
    table = tables._StreamedTable(folder, "streamed.csv", "streamed.parquet", ANY_COLUMNS)
    for rows in chunks:
        table.append(rows)
    table.close()
    for temp, final in table.targets:
        temp.replace(final)
    assert (folder / "streamed.csv").read_bytes() == (folder / "pandas.csv").read_bytes()
    assert pq.read_table(folder / "streamed.parquet").equals(
        pq.read_table(folder / "pandas.parquet")
    )
    assert (folder / "streamed.parquet").read_bytes() == (folder / "pandas.parquet").read_bytes()


@pytest.mark.skipif(not tables.parquet_available(), reason="pyarrow not installed")
def test_tables_without_rows_still_have_their_columns_and_dtypes(tmp_path: Path) -> None:
    # The Parquet writer opens with the first rows; a run with none (every study failed) still
    # gets files that read back as empty tables of the declared dtypes.
    with tables.TableWriter(tmp_path, parquet=True) as writer:
        writer.append([], [])
        written = writer.commit()
    assert sorted(p.name for p in written) == sorted(
        [tables.STUDIES_CSV, tables.STUDIES_PARQUET, tables.SEGMENTS_CSV, tables.SEGMENTS_PARQUET]
    )
    pd.testing.assert_frame_equal(
        tables.read_studies_csv(tmp_path / tables.STUDIES_CSV),
        tables.studies_frame([]),
        check_index_type=False,
    )
    # the same bytes as the DataFrame route's writer opened at the start and given no rows
    write_dataframes(
        tmp_path / "pandas.csv", tmp_path / "pandas.parquet", tables.SEGMENT_COLUMNS, []
    )
    assert (tmp_path / tables.SEGMENTS_PARQUET).read_bytes() == (
        tmp_path / "pandas.parquet"
    ).read_bytes()
    assert list(pd.read_parquet(tmp_path / tables.SEGMENTS_PARQUET).columns) == list(
        tables.SEGMENT_COLUMNS
    )


@pytest.mark.skipif(not tables.parquet_available(), reason="pyarrow not installed")
def test_pandas_and_pyarrow_load_only_with_the_first_rows_or_in_the_background(
    tmp_path: Path,
) -> None:
    # A batch opens its tables before any study runs; the second the two libraries take to import
    # is spent while the workers work (preload_parquet), not before they start.
    import subprocess
    import sys

    script = f"""
import sys
from pathlib import Path
from reporting.export import tables
writer = tables.TableWriter(Path({str(tmp_path)!r}), parquet=True)
print("pandas" in sys.modules, "pyarrow" in sys.modules)
thread = tables.preload_parquet()
thread.join()
print("pandas" in sys.modules, "pyarrow.parquet" in sys.modules)
writer.abort()
"""
    done = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, check=True, timeout=120
    )
    assert done.stdout.split("\n")[:2] == ["False False", "True True"]
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize(
    ("column", "value"),
    [
        ("whole", 3.5),
        ("whole", 2**63),
        ("whole", float("inf")),
        ("flag", "False"),
        ("flag", 2),
    ],
    ids=repr,
)
def test_a_value_its_dtype_cannot_hold_is_refused_naming_the_column(
    column: str, value: object, tmp_path: Path
) -> None:
    # pandas refuses these too (the oracle); the streamed writer says which table and column. (It
    # also refuses numeric text such as "7", which pandas would read as a number.)
    row = tuple(value if name == column else None for name in ANY_COLUMNS)
    with pytest.raises((TypeError, ValueError, OverflowError)):
        write_dataframes(tmp_path / "pandas.csv", None, ANY_COLUMNS, [[row]])
    table = tables._StreamedTable(tmp_path, "streamed.csv", None, ANY_COLUMNS)
    with pytest.raises(ValueError, match=f"streamed.csv, column {column}: "):
        table.append([row])
    table.discard()
    assert not list(tmp_path.glob(".streamed*"))


@pytest.mark.parametrize("parquet", [True, False], ids=["with parquet", "csv only"])
def test_a_table_name_taken_by_a_folder_is_refused_before_any_study_runs(
    parquet: bool, tmp_path: Path
) -> None:
    from reporting.errors import OutputError

    taken = tables.STUDIES_PARQUET if parquet else tables.SEGMENTS_CSV
    (tmp_path / taken).mkdir()
    with pytest.raises(OutputError, match="it is a folder"):
        tables.TableWriter(tmp_path, parquet=True)
    assert sorted(p.name for p in tmp_path.iterdir()) == [taken]
