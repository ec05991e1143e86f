"""Reading time-intensity curve files (CSV of the interface contract) into checked curves.

A curve file has one row per frame: ``stage,segment,time_s,intensity`` (linear) or ``intensity_db``
instead of ``intensity`` (log-compressed, converted as linear = 10^(dB / divisor), divisor 10 for
power-like intensity by default — common practice, configurable). A file that cannot be read as such
a table (missing columns, non-numeric cells, no rows) raises :class:`~reporting.errors.InputErrors`
with file and line. Problems of single curves — unknown stage or segment, duplicate times, missing,
negative or constant intensities, too few frames — are kept on the curve with their location, so
they reach the record instead of stopping the analysis or vanishing. Frames with negative time come
before the end of the flash and are counted but not fitted; rows are sorted by time.
"""

from __future__ import annotations

import csv
import io
import itertools
import math
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import numpy.typing as npt

from reporting.documents import read_bytes_limited
from reporting.errors import InputError, InputErrors
from reporting.kinetics.models import CurveProblem, FitStatus, IntensityScale
from reporting.model import STAGE_ORDER, Stage
from reporting.segments import SegmentModel
from reporting.settings import Settings, default_settings

FloatArray = npt.NDArray[np.float64]

MAX_CURVE_BYTES = 50_000_000
MAX_LISTED_PROBLEMS = 20
# Exporters write missing frames as an empty cell or a NaN token; both mean "no intensity here".
_MISSING_TOKENS = frozenset({"", "nan", "na", "n/a", "null", "none"})
# A curve whose intensities differ by less than this fraction of their size is constant.
_CONSTANT_RELATIVE_SPREAD = 1e-12
_REQUIRED = ("stage", "segment", "time_s")
_INTENSITY_COLUMNS = {"intensity": IntensityScale.LINEAR, "intensity_db": IntensityScale.DB}


@dataclass(frozen=True)
class Curve:
    """One stage-and-segment curve: post-flash frames in time order, linear intensity."""

    stage_label: str
    segment: int
    time_s: FloatArray
    intensity: FloatArray
    lines: tuple[int, ...]
    pre_flash_frames: int
    reordered: bool
    location: str
    problems: tuple[CurveProblem, ...] = ()

    @property
    def stage(self) -> Stage | None:
        """The stage, or ``None`` when the label is not a known stage."""
        return Stage(self.stage_label) if self.stage_label in _STAGE_VALUES else None

    @property
    def fittable(self) -> bool:
        """No problem stops the fit."""
        return not self.problems


@dataclass(frozen=True)
class CurveSet:
    """All curves of one file, in stage then segment order, with their problems."""

    source: str  # the name curve locations use (a bare file name when read by load_curves)
    intensity_scale: IntensityScale
    segment_model: SegmentModel | None
    curves: tuple[Curve, ...]
    ignored_columns: tuple[str, ...] = field(default=())

    @property
    def problems(self) -> list[CurveProblem]:
        """Every per-curve problem, in curve order."""
        return [p for c in self.curves for p in c.problems]


_STAGE_VALUES = frozenset(s.value for s in Stage)


def load_curves(
    path: Path | str,
    *,
    segment_model: SegmentModel | int | None,
    settings: Settings | None = None,
) -> CurveSet:
    """Read and check the curve file at ``path``.

    ``segment_model`` decides which segment numbers exist; ``None`` (a curve file on its own)
    accepts 1–18, the numbers of the largest model. Raises :class:`InputError` or
    :class:`InputErrors` for a file that is not a readable curve table.
    """
    path = Path(path)
    where = str(path)
    raw = read_bytes_limited(path, what="curve file", max_bytes=MAX_CURVE_BYTES)
    if b"\x00" in raw:
        raise InputError(where, "binary file, not CSV text")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(where, f"not UTF-8 text (byte {exc.start})") from None
    return parse_curves(
        text, source=where, segment_model=segment_model, settings=settings, curve_source=path.name
    )


@dataclass
class _Frame:
    line: int
    time_s: float
    value: float | None  # None: missing intensity


def parse_curves(
    text: str,
    *,
    source: str,
    segment_model: SegmentModel | int | None,
    settings: Settings | None = None,
    curve_source: str | None = None,
) -> CurveSet:
    """Check curve-file ``text`` (see :func:`load_curves`).

    File-level errors name ``source``; per-curve locations, which reach the analysis record, name
    ``curve_source`` (default ``source``) — :func:`load_curves` gives the bare file name there, so
    no folder path enters a record.
    """
    settings = settings or default_settings()
    kept_as = curve_source if curve_source is not None else source
    if not text.strip():
        raise InputError(source, "file is empty")
    reader = csv.reader(io.StringIO(text))
    header: list[str] | None = None
    header_line = 0
    for row in reader:
        if any(cell.strip() for cell in row):
            header = [cell.strip().lower() for cell in row]
            header_line = reader.line_num
            break
    if header is None:
        raise InputError(source, "file is empty")
    scale, columns, ignored = _columns(header, f"{source}: line {header_line}")

    errors: list[InputError] = []
    groups: dict[tuple[str, int], list[_Frame]] = {}
    for row in reader:
        line = reader.line_num
        if not any(cell.strip() for cell in row):
            continue  # blank line: no frame
        if len(row) != len(header):
            errors.append(
                InputError(
                    f"{source}: line {line}", f"expected {len(header)} cells, found {len(row)}"
                )
            )
            continue
        parsed = _row(row, columns, f"{source}: line {line}", errors)
        if parsed is not None:
            stage, segment, time_s, value = parsed
            groups.setdefault((stage, segment), []).append(_Frame(line, time_s, value))
    if errors:
        raise InputErrors(_capped(errors, source))
    if not groups:
        raise InputError(source, "no data rows after the header")

    highest = int(segment_model) if segment_model is not None else max(SegmentModel)
    divisor = settings.kinetics_db_to_linear_divisor
    curves = [
        _curve(
            kept_as, stage, segment, frames, scale, divisor, highest, settings.kinetics_min_frames
        )
        for (stage, segment), frames in sorted(groups.items(), key=lambda kv: _order(*kv[0]))
    ]
    return CurveSet(
        source=kept_as,
        intensity_scale=scale,
        segment_model=SegmentModel(segment_model) if segment_model is not None else None,
        curves=tuple(curves),
        ignored_columns=tuple(ignored),
    )


def db_to_linear(db: FloatArray | float, divisor: float = 10.0) -> FloatArray:
    """Log-compressed intensity (dB) to linear: 10^(dB / divisor); 10 for power-like values."""
    return np.power(10.0, np.asarray(db, dtype=np.float64) / divisor)


def _columns(header: list[str], where: str) -> tuple[IntensityScale, dict[str, int], list[str]]:
    seen: set[str] = set()
    for name in header:
        if name in seen:
            raise InputError(where, f"column {name!r} appears twice")
        seen.add(name)
    missing = [c for c in _REQUIRED if c not in seen]
    given = [c for c in _INTENSITY_COLUMNS if c in seen]
    if len(given) == 2:
        raise InputError(where, "give either 'intensity' (linear) or 'intensity_db', not both")
    if not given:
        missing.append("intensity (or intensity_db)")
    if missing:
        raise InputError(
            where,
            f"missing column(s) {', '.join(missing)}; expected stage,segment,time_s,intensity",
        )
    columns = {c: header.index(c) for c in (*_REQUIRED, given[0])}
    columns["value"] = columns.pop(given[0])
    ignored = [c for c in header if c not in (*_REQUIRED, given[0])]
    return _INTENSITY_COLUMNS[given[0]], columns, ignored


def _row(
    row: list[str], columns: dict[str, int], where: str, errors: list[InputError]
) -> tuple[str, int, float, float | None] | None:
    stage = row[columns["stage"]].strip().lower()
    segment_text = row[columns["segment"]].strip()
    time_text = row[columns["time_s"]].strip()
    value_text = row[columns["value"]].strip()
    ok = True
    if not stage:
        errors.append(InputError(where, "stage is empty"))
        ok = False
    try:
        segment = int(segment_text)
    except ValueError:
        errors.append(InputError(where, f"segment {segment_text!r} is not a whole number"))
        ok = False
    time_s = _number(time_text)
    if time_s is None or not math.isfinite(time_s):
        errors.append(InputError(where, f"time_s {time_text!r} is not a finite number"))
        ok = False
    value: float | None = None
    if value_text.lower() not in _MISSING_TOKENS:
        value = _number(value_text)
        if value is None:
            errors.append(InputError(where, f"intensity {value_text!r} is not a number"))
            ok = False
        elif not math.isfinite(value):
            value = None
    if not ok or time_s is None:
        return None
    return stage, segment, time_s, value


def _number(text: str) -> float | None:
    if "_" in text:  # float() accepts "1_000"; a CSV cell should not
        return None
    try:
        return float(text)
    except ValueError:
        return None


def _capped(errors: list[InputError], source: str) -> list[InputError]:
    if len(errors) <= MAX_LISTED_PROBLEMS:
        return errors
    more = len(errors) - MAX_LISTED_PROBLEMS
    return [*errors[:MAX_LISTED_PROBLEMS], InputError(source, f"and {more} more problem(s)")]


def _order(stage: str, segment: int) -> tuple[int, str, int]:
    known = stage in _STAGE_VALUES
    rank = STAGE_ORDER.index(Stage(stage)) if known else len(STAGE_ORDER)
    return rank, stage, segment


def _curve(
    source: str,
    stage: str,
    segment: int,
    frames: list[_Frame],
    scale: IntensityScale,
    divisor: float,
    highest_segment: int,
    min_frames: int,
) -> Curve:
    all_lines = [f.line for f in frames]
    location = f"{source}: stage {stage}, segment {segment} (lines {_lines(all_lines)})"
    times_in_file = [f.time_s for f in frames]
    reordered = any(b < a for a, b in itertools.pairwise(times_in_file))
    post = sorted((f for f in frames if f.time_s >= 0), key=lambda f: f.time_s)
    pre_flash = len(frames) - len(post)
    lines = tuple(f.line for f in post)
    time_s = np.array([f.time_s for f in post], dtype=np.float64)
    raw = np.array([np.nan if f.value is None else f.value for f in post], dtype=np.float64)
    with np.errstate(over="ignore"):
        intensity = db_to_linear(raw, divisor) if scale is IntensityScale.DB else raw

    problems: list[CurveProblem] = []

    def add(reason: FitStatus, at: Iterable[int] | None, detail: str) -> None:
        if at is None:
            where = location
        else:
            rows = list(at)
            where = f"{source}: line{'s' if len(rows) > 1 else ''} {_lines(rows)}"
        problems.append(CurveProblem(reason=reason, location=where, detail=detail))

    if stage not in _STAGE_VALUES:
        add(
            FitStatus.UNKNOWN_STAGE,
            None,
            f"stage {stage!r} is not one of {', '.join(s.value for s in Stage)}",
        )
    if not 1 <= segment <= highest_segment:
        add(
            FitStatus.UNKNOWN_SEGMENT,
            None,
            f"segment {segment} does not exist in the {highest_segment}-segment model",
        )
    bad = ~np.isfinite(intensity)
    if bad.any():
        rows = [ln for ln, b in zip(lines, bad, strict=True) if b]
        what = "missing, NaN or infinite" if scale is IntensityScale.LINEAR else "missing or NaN"
        add(FitStatus.MISSING_INTENSITY, rows, f"{len(rows)} frame(s) with {what} intensity")
    negative = np.isfinite(intensity) & (intensity < 0)
    if negative.any():
        rows = [ln for ln, b in zip(lines, negative, strict=True) if b]
        add(
            FitStatus.NEGATIVE_INTENSITY,
            rows,
            f"{len(rows)} frame(s) with negative linear intensity (lowest {intensity[negative].min():g})",
        )
    if time_s.size > 1:
        same = np.flatnonzero(np.diff(time_s) <= 0)
        if same.size:
            rows = sorted({lines[i] for i in same} | {lines[i + 1] for i in same})
            times = ", ".join(f"{t:g}" for t in np.unique(time_s[same]))
            add(FitStatus.DUPLICATE_TIMES, rows, f"more than one frame at time_s {times}")
    finite = intensity[np.isfinite(intensity)]
    if finite.size > 1 and np.ptp(finite) <= _CONSTANT_RELATIVE_SPREAD * max(
        float(np.abs(finite).max()), np.finfo(np.float64).tiny
    ):
        add(
            FitStatus.CONSTANT_INTENSITY,
            None,
            f"all {finite.size} post-flash intensities equal {finite[0]:g}",
        )
    if len(post) < min_frames:
        add(
            FitStatus.TOO_FEW_FRAMES,
            None,
            f"{len(post)} post-flash frame(s) (time_s ≥ 0); at least {min_frames} needed"
            + (f"; {pre_flash} pre-flash frame(s) not fitted" if pre_flash else ""),
        )
    return Curve(
        stage_label=stage,
        segment=segment,
        time_s=time_s,
        intensity=intensity,
        lines=lines,
        pre_flash_frames=pre_flash,
        reordered=reordered,
        location=location,
        problems=tuple(problems),
    )


def _lines(lines: list[int]) -> str:
    """``[4, 5, 6, 9]`` -> ``"4–6, 9"``."""
    runs: list[list[int]] = []
    for n in sorted(lines):
        if runs and n == runs[-1][-1] + 1:
            runs[-1].append(n)
        else:
            runs.append([n])
    return ", ".join(f"{r[0]}–{r[-1]}" if len(r) > 1 else str(r[0]) for r in runs)
