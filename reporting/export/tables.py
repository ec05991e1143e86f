"""Analysis-ready tables: one row per study and one row per study × stage × segment (pandas).

:func:`study_row` and :func:`segment_rows` flatten a typed :class:`~reporting.results.Analysis` into
plain tuples (cheap to send between processes); :func:`studies_frame` and :func:`segments_frame`
turn such rows into DataFrames with fixed columns and pandas nullable dtypes (``Int64``,
``Float64``, ``boolean``, ``string``, and categoricals whose categories are the enum values), so
every chunk of a batch has the same schema. :class:`TableWriter` streams chunks to ``studies.csv``
and ``segments.csv`` (and Parquet when pyarrow is importable) through temporary files renamed on
:meth:`~TableWriter.commit`, so memory does not grow with the number of studies and an interrupted
run leaves no half-written table. It writes the bytes those DataFrames would write without building
them (pandas is imported only for the Parquet schema). :func:`read_studies_csv` and
:func:`read_segments_csv` read the CSV back with the same dtypes.

The files feed other engines unchanged: DuckDB reads ``read_parquet('segments.parquet')`` or
``read_csv_auto('segments.csv')``, and Spark ``spark.read.parquet(...)`` or
``spark.read.csv(..., header=True)``; lists (territories, segment numbers, finding codes) are
joined with ``;`` in the CSV form.

Rows of a de-identified record (``study.deidentified``) keep only what the de-identification
allow-list keeps (:func:`reporting.deidentify.deidentified_row`): every caller, the batch or an
export from the store, gets the same columns emptied.
"""

from __future__ import annotations

import contextlib
import csv
import importlib.util
import logging
import numbers
import operator
import os
import threading
from collections.abc import Callable, Iterable, Sequence
from pathlib import Path
from typing import IO, TYPE_CHECKING, Any

from reporting.files import check_target, temporary_beside
from reporting.model import Protocol, ReportStatus, Sex, Stage
from reporting.results import Analysis, DiagnosticStatus
from reporting.scoring import IschemiaExtent, PerfusionResponse, WallMotionResponse
from reporting.segments import Ring, Territory
from reporting.stress import DukeRisk

if TYPE_CHECKING:
    import pandas as pd  # type: ignore[import-untyped, unused-ignore]

log = logging.getLogger(__name__)

Row = tuple[Any, ...]

LIST_SEPARATOR = ";"
STUDIES_CSV = "studies.csv"
SEGMENTS_CSV = "segments.csv"
STUDIES_PARQUET = "studies.parquet"
SEGMENTS_PARQUET = "segments.parquet"
STUDIES_SCOPE = "studies"
SEGMENTS_SCOPE = "segments"
"""Scopes of the two tables in the de-identification allow-list (``data/deidentify_fields.csv``)."""

_STAGES = tuple(Stage)
_TERRITORIES = tuple(Territory)


def _category(values: Iterable[str]) -> tuple[str, tuple[str, ...]]:
    return ("category", tuple(str(v) for v in values))


# Column name -> dtype; a ("category", values) pair is a categorical with those categories.
STUDY_COLUMNS: dict[str, str | tuple[str, tuple[str, ...]]] = {
    "study_id": "string",
    "patient_id": "string",
    "date": "string",
    "year": "Int64",
    "deidentified": "boolean",
    "report_status": _category(ReportStatus),
    "protocol": _category(Protocol),
    "segment_model": "Int64",
    "wall_motion_scale": "Int64",
    "territory_map": "string",
    "stages": "string",
    "age_years": "Int64",
    "age_group": "string",
    "sex": _category(Sex),
    **{f"wmsi_{s}": "Float64" for s in _STAGES},
    "status": _category(DiagnosticStatus),
    "ischemia": "boolean",
    "ischemic_territories": "string",
    "ischemic_segment_count": "Int64",
    "ischemia_extent": _category(IschemiaExtent),
    "multivessel": "boolean",
    **{f"{t.value.lower()}_ischemic": "boolean" for t in _TERRITORIES},
    "viable_segment_count": "Int64",
    **{f"defect_extent_percent_{s}": "Float64" for s in _STAGES},
    "reversible_perfusion_segments": "string",
    "partially_reversible_perfusion_segments": "string",
    "fixed_perfusion_segments": "string",
    "stress_adequate": "boolean",
    "peak_hr_bpm": "Int64",
    "peak_hr_percent_of_predicted": "Float64",
    "target_hr_bpm": "Float64",
    "duke_treadmill_score": "Float64",
    "duke_risk": _category(DukeRisk),
    "lvef_rest_percent": "Float64",
    "lvef_peak_percent": "Float64",
    "high_risk_findings": "string",
    "high_risk_finding_count": "Int64",
}
"""Columns of ``studies.csv`` in order, with their pandas dtypes."""

SEGMENT_COLUMNS: dict[str, str | tuple[str, tuple[str, ...]]] = {
    "study_id": "string",
    "stage": _category(Stage),
    "segment": "Int64",
    "segment_name": "string",
    "ring": _category(Ring),
    "territory": _category(Territory),
    "wall_motion": "Int64",
    "perfusion": "Int64",
    "response": _category(WallMotionResponse),
    "perfusion_response": _category(PerfusionResponse),
}
"""Columns of ``segments.csv`` in order (one row per study × stage × segment)."""


def _joined(values: Iterable[object]) -> str | None:
    # An empty list is null: CSV cannot tell an empty string from a missing value.
    text = LIST_SEPARATOR.join(str(v) for v in values)
    return text or None


def study_row(analysis: Analysis) -> Row:
    """One row of the studies table, in :data:`STUDY_COLUMNS` order."""
    a = analysis
    rest = a.haemodynamics.get(Stage.REST)
    peak = a.haemodynamics.get(Stage.PEAK)
    values: dict[str, Any] = {
        "study_id": a.study.id,
        "patient_id": a.patient.id,
        "date": a.study.date.isoformat() if a.study.date is not None else None,
        "year": a.study.year,
        "deidentified": a.study.deidentified,
        "report_status": a.study.report_status.value,
        "protocol": a.protocol.value,
        "segment_model": int(a.segment_model),
        "wall_motion_scale": a.wall_motion_scale,
        "territory_map": a.territory_map.name,
        "stages": _joined(s.value for s in a.stages),
        "age_years": a.patient.age_years,
        "age_group": a.patient.age_group,
        "sex": a.patient.sex.value if a.patient.sex is not None else None,
        **{f"wmsi_{s}": a.wmsi.get(s) for s in _STAGES},
        "status": a.conclusion.status.value,
        "ischemia": a.conclusion.ischemia,
        "ischemic_territories": _joined(t.value for t in a.conclusion.ischemic_territories),
        "ischemic_segment_count": a.conclusion.ischemic_segment_count,
        "ischemia_extent": a.conclusion.ischemia_extent.value,
        "multivessel": a.conclusion.multivessel,
        **{
            f"{t.value.lower()}_ischemic": a.territories[t].ischemic if t in a.territories else None
            for t in _TERRITORIES
        },
        "viable_segment_count": len(a.conclusion.viable_segments),
        **{f"defect_extent_percent_{s}": a.perfusion.defect_extent_percent.get(s) for s in _STAGES},
        "reversible_perfusion_segments": _joined(a.perfusion.reversible_segments),
        "partially_reversible_perfusion_segments": _joined(
            a.perfusion.partially_reversible_segments
        ),
        "fixed_perfusion_segments": _joined(a.perfusion.fixed_segments),
        "stress_adequate": a.stress.adequate,
        "peak_hr_bpm": a.stress.peak_hr_bpm,
        "peak_hr_percent_of_predicted": a.stress.peak_hr_percent_of_predicted,
        "target_hr_bpm": a.stress.target_hr_bpm,
        "duke_treadmill_score": a.stress.duke_treadmill_score,
        "duke_risk": a.stress.duke_risk.value if a.stress.duke_risk is not None else None,
        "lvef_rest_percent": rest.lvef_percent if rest is not None else None,
        "lvef_peak_percent": peak.lvef_percent if peak is not None else None,
        "high_risk_findings": _joined(f.code.value for f in a.conclusion.high_risk_findings),
        "high_risk_finding_count": len(a.conclusion.high_risk_findings),
    }
    row = tuple(values[c] for c in STUDY_COLUMNS)
    return _allowed(STUDIES_SCOPE, STUDY_COLUMNS, row) if a.study.deidentified else row


def segment_rows(analysis: Analysis) -> list[Row]:
    """Rows of the segments table for one study: stages in protocol order, segments in number order.

    For a de-identified record every row goes through the allow-list, as study rows do.
    """
    sid = analysis.study.id
    segments = [  # the per-segment columns, worked out once for every stage
        (
            seg,
            (seg.number, seg.name, seg.ring.value, seg.territory.value),
            (seg.response.value, seg.perfusion_response.value),
        )
        for seg in analysis.segments
    ]
    rows: list[Row] = [
        (
            sid,
            stage.value,
            *head,
            seg.wall_motion.get(stage),
            seg.perfusion.get(stage),
            *tail,
        )
        for stage in analysis.stages
        for seg, head, tail in segments
    ]
    if analysis.study.deidentified:
        return [_allowed(SEGMENTS_SCOPE, SEGMENT_COLUMNS, row) for row in rows]
    return rows


def _allowed(scope: str, columns: dict[str, Any], row: Row) -> Row:
    # A de-identified record's row: only what the allow-list keeps (dropped columns are null).
    from reporting.deidentify import deidentified_row

    return deidentified_row(scope, tuple(columns), row)


def _dtypes(columns: dict[str, str | tuple[str, tuple[str, ...]]]) -> dict[str, Any]:
    import pandas as pd

    return {
        name: pd.CategoricalDtype(list(kind[1])) if isinstance(kind, tuple) else kind
        for name, kind in columns.items()
    }


def _frame(
    rows: Sequence[Row], columns: dict[str, str | tuple[str, tuple[str, ...]]]
) -> pd.DataFrame:
    import pandas as pd

    frame = pd.DataFrame.from_records(list(rows), columns=list(columns))
    return frame.astype(_dtypes(columns)) if len(frame) else _empty(columns)


def _empty(columns: dict[str, str | tuple[str, tuple[str, ...]]]) -> pd.DataFrame:
    import pandas as pd

    return pd.DataFrame(
        {name: pd.Series([], dtype=dtype) for name, dtype in _dtypes(columns).items()}
    )


def studies_frame(rows: Sequence[Row]) -> pd.DataFrame:
    """The studies table from rows made by :func:`study_row`."""
    return _frame(rows, STUDY_COLUMNS)


def segments_frame(rows: Sequence[Row]) -> pd.DataFrame:
    """The segments table from rows made by :func:`segment_rows`."""
    return _frame(rows, SEGMENT_COLUMNS)


def _read_csv(path: Path, columns: dict[str, str | tuple[str, tuple[str, ...]]]) -> pd.DataFrame:
    import pandas as pd

    return pd.read_csv(path, dtype=_dtypes(columns), keep_default_na=False, na_values=[""])


def read_studies_csv(path: Path) -> pd.DataFrame:
    """Read ``studies.csv`` back with its dtypes."""
    return _read_csv(path, STUDY_COLUMNS)


def read_segments_csv(path: Path) -> pd.DataFrame:
    """Read ``segments.csv`` back with its dtypes."""
    return _read_csv(path, SEGMENT_COLUMNS)


def parquet_available() -> bool:
    """True when pyarrow is importable (the ``parquet`` extra)."""
    return importlib.util.find_spec("pyarrow") is not None


def preload_parquet() -> threading.Thread | None:
    """Import what Parquet writing needs (pandas, pyarrow; about a second) in a background thread.

    For a process that waits on workers anyway: the import then overlaps their work instead of
    delaying it. Start it only once the workers exist; a process forked while another thread
    imports can inherit a held import lock. A failed import is left for the first use to report.
    ``None`` when pyarrow is not installed.
    """
    if not parquet_available():
        return None

    def load() -> None:
        with contextlib.suppress(Exception):
            import pandas  # type: ignore[import-untyped, unused-ignore]  # noqa: F401
            import pyarrow.parquet  # type: ignore[import-untyped, unused-ignore]  # noqa: F401

    thread = threading.Thread(target=load, name="parquet-preload", daemon=True)
    thread.start()
    return thread


class _StreamedTable:
    """One table streamed as CSV (and optionally Parquet) into temporary files.

    Chunks are written straight from the rows, without building a DataFrame: each value is first
    cleaned as its column's pandas dtype would hold it (:func:`_cleaners`), then the CSV goes through
    the same :mod:`csv` writer settings as ``DataFrame.to_csv`` and the Parquet through Arrow arrays
    of the schema pyarrow derives from the pandas dtypes. The bytes are those the DataFrame route
    writes (``tests/test_tables.py`` checks it against pandas); the batch's parent process, which
    writes every study's rows, spends a fraction of the time.
    """

    def __init__(
        self,
        outdir: Path,
        csv_name: str,
        parquet_name: str | None,
        columns: dict[str, str | tuple[str, tuple[str, ...]]],
    ) -> None:
        self.columns = columns
        self._clean = _cleaners(columns)
        self.targets: list[tuple[Path, Path]] = []
        self._csv: IO[str] = _temp_text(outdir, csv_name, self.targets)
        self._csv.write(",".join(columns) + "\n")
        # DataFrame.to_csv's writer: minimal quoting, doubled quotes, "\n" ends a line.
        self._csv_rows = csv.writer(self._csv, lineterminator="\n")
        self._outdir = outdir
        self._csv_name = csv_name
        self._parquet_name = parquet_name
        self._parquet: Any = None  # opened with the first rows: pandas and pyarrow load late
        self._parquet_file: IO[bytes] | None = None
        if parquet_name is not None:  # opened late, refused early (a folder or FIFO of that name)
            try:
                check_target(outdir / parquet_name)
            except BaseException:
                self.discard()
                raise

    def _parquet_writer(self) -> Any:
        if self._parquet is None:
            import pyarrow as pa  # type: ignore[import-untyped, unused-ignore]
            import pyarrow.parquet as pq  # type: ignore[import-untyped, unused-ignore]

            assert self._parquet_name is not None
            # From the empty DataFrame, so the file carries pandas' metadata and reads back with
            # the declared dtypes.
            self._schema = pa.Schema.from_pandas(_empty(self.columns), preserve_index=False)
            self._parquet_file = _temp_binary(self._outdir, self._parquet_name, self.targets)
            self._parquet = pq.ParquetWriter(self._parquet_file, self._schema, compression="zstd")
        return self._parquet

    def append(self, rows: Sequence[Row]) -> None:
        if not rows:
            return
        columns = []
        for name, clean, values in zip(
            self.columns, self._clean, zip(*rows, strict=True), strict=True
        ):
            try:
                columns.append(list(map(clean, values)))
            except (TypeError, ValueError) as exc:  # a row builder's bug: say where
                raise ValueError(f"{self._csv_name}, column {name}: {exc}") from None
        self._csv_rows.writerows(zip(*columns, strict=True))
        if self._parquet_name is not None:
            writer = self._parquet_writer()
            writer.write_table(_arrow_table(columns, self.columns, self._schema))

    def close(self) -> None:
        """Finish both files (a Parquet file that got no rows still gets its schema)."""
        try:
            if self._parquet_name is not None:
                self._parquet_writer().close()  # writes the footer; the file is ours to close
        finally:
            self._close_files()

    def discard(self) -> None:
        """Close without finishing and delete the temporary files."""
        if self._parquet is not None:
            with contextlib.suppress(Exception):
                self._parquet.close()
        with contextlib.suppress(Exception):
            self._close_files()
        for temp, _ in self.targets:
            with contextlib.suppress(FileNotFoundError):
                temp.unlink()

    def _close_files(self) -> None:
        self._parquet_name = None
        try:
            if self._parquet_file is not None:
                self._parquet_file.close()
        finally:
            self._csv.close()


Cleaner = Callable[[Any], Any]


_INT64_MIN, _INT64_MAX = -(2**63), 2**63 - 1


def _missing(value: Any) -> bool:
    # None, or a float NaN (pandas reads NaN as missing in every nullable dtype)
    return value is None or (type(value) is float and value != value)


def _text(value: Any) -> str | None:
    if type(value) is str or value is None:
        return value
    return None if _missing(value) else str(value)


def _integer(value: Any) -> int | None:
    """A whole number within Int64, as pandas stores it; anything else is refused, as pandas
    refuses it (a fraction, text, a number beyond 64 bits)."""
    if (type(value) is int and _INT64_MIN <= value <= _INT64_MAX) or value is None:
        return value
    if _missing(value):
        return None
    if isinstance(value, float):
        if not value.is_integer():
            raise ValueError(f"{value!r} is not a whole number")
        value = int(value)
    elif isinstance(value, (str, bytes)):
        raise ValueError(f"{value!r} is not a whole number")
    else:
        value = operator.index(value)  # bool, numpy integers; TypeError for anything else
    if not _INT64_MIN <= value <= _INT64_MAX:
        raise ValueError(f"{value} does not fit a 64-bit integer")
    return int(value)


def _real(value: Any) -> float | None:
    # The csv module writes a float by repr, as pandas does.
    if type(value) is float:
        return None if value != value else value
    if value is None:
        return None
    if isinstance(value, numbers.Real):  # int, bool, numpy floats (NaN among them)
        number = float(value)
        return None if number != number else number
    raise ValueError(f"{value!r} is not a number")


def _flag(value: Any) -> bool | None:
    if type(value) is bool or value is None:
        return value
    if _missing(value):
        return None
    raise ValueError(f"{value!r} is not true or false")


def _cleaners(columns: dict[str, str | tuple[str, tuple[str, ...]]]) -> list[Cleaner]:
    """Per column, what its pandas dtype makes of a row value (``None`` is missing).

    A categorical keeps only its categories (pandas turns any other value into a missing one).
    """
    plain: dict[str, Cleaner] = {
        "string": _text,
        "Int64": _integer,
        "Float64": _real,
        "boolean": _flag,
    }
    return [
        {c: c for c in kind[1]}.get if isinstance(kind, tuple) else plain[kind]
        for kind in columns.values()
    ]


def _arrow_table(
    values: list[list[Any]], columns: dict[str, str | tuple[str, tuple[str, ...]]], schema: Any
) -> Any:
    """Cleaned columns as an Arrow table of ``schema`` (what ``Table.from_pandas`` makes of them)."""
    import pyarrow as pa

    arrays = []
    for column, kind, field in zip(values, columns.values(), schema, strict=True):
        if isinstance(kind, tuple):  # pandas' codes into all the categories, in their order
            code = {c: i for i, c in enumerate(kind[1])}
            indices = pa.array(list(map(code.get, column)), type=field.type.index_type)
            dictionary = pa.array(kind[1], type=field.type.value_type)
            arrays.append(
                pa.DictionaryArray.from_arrays(indices, dictionary, ordered=field.type.ordered)
            )
        else:
            arrays.append(pa.array(column, type=field.type))
    return pa.Table.from_arrays(arrays, schema=schema)


def _temp_text(outdir: Path, name: str, targets: list[tuple[Path, Path]]) -> IO[str]:
    fd, temp = temporary_beside(outdir / name)
    targets.append((temp, outdir / name))
    return os.fdopen(fd, "w", encoding="utf-8", newline="")


def _temp_binary(outdir: Path, name: str, targets: list[tuple[Path, Path]]) -> IO[bytes]:
    fd, temp = temporary_beside(outdir / name)
    targets.append((temp, outdir / name))
    return os.fdopen(fd, "wb")


class TableWriter:
    """Streams the studies and segments tables; nothing appears under its final name before :meth:`commit`.

    Use as a context manager: leaving the block by an exception removes the temporary files.
    ``parquet=None`` writes Parquet when pyarrow is importable.
    """

    def __init__(self, outdir: Path, *, parquet: bool | None = None) -> None:
        outdir.mkdir(parents=True, exist_ok=True)
        self.parquet = parquet_available() if parquet is None else parquet
        self._tables: list[_StreamedTable] = []
        try:
            self._studies = self._open(outdir, STUDIES_CSV, STUDIES_PARQUET, STUDY_COLUMNS)
            self._segments = self._open(outdir, SEGMENTS_CSV, SEGMENTS_PARQUET, SEGMENT_COLUMNS)
        except BaseException:
            self.abort()
            raise

    def _open(
        self,
        outdir: Path,
        csv_name: str,
        parquet_name: str,
        columns: dict[str, str | tuple[str, tuple[str, ...]]],
    ) -> _StreamedTable:
        table = _StreamedTable(outdir, csv_name, parquet_name if self.parquet else None, columns)
        self._tables.append(table)
        return table

    def append(self, studies: Sequence[Row], segments: Sequence[Row]) -> None:
        """Add one chunk of rows (keep chunk boundaries deterministic for byte-stable Parquet)."""
        self._studies.append(studies)
        self._segments.append(segments)

    def commit(self) -> list[Path]:
        """Close the files and move them to their final names; return those names."""
        written: list[Path] = []
        for table in self._tables:
            table.close()
        for table in self._tables:
            for temp, final in table.targets:
                os.replace(temp, final)
                written.append(final)
        self._tables = []
        return written

    def abort(self) -> None:
        """Close and delete the temporary files."""
        for table in self._tables:
            table.discard()
        self._tables = []

    def __enter__(self) -> TableWriter:
        return self

    def __exit__(self, kind: object, value: object, traceback: object) -> None:
        if kind is not None:
            self.abort()
