"""Fitting a curve file on its own: one row per curve, and the rows as CSV text.

This backs ``segreport curves CURVES.csv [-o fits.csv]``: no study file, so segment numbers 1–18
are accepted unless a segment model is given, and no reserve is computed — only the fits.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Sequence
from pathlib import Path

from reporting.kinetics.curves import load_curves
from reporting.kinetics.fit import fit_curve_set
from reporting.segments import SegmentModel
from reporting.settings import Settings, default_settings

FitRow = dict[str, str | int | float | None]

FIT_COLUMNS = (
    "stage",
    "segment",
    "status",
    "frames",
    "pre_flash_frames_excluded",
    "A",
    "beta",
    "C",
    "A_beta",
    "r_squared",
    "time_to_90_percent_s",
    "residual_sum_of_squares",
    "problems",
)


def fit_curve_file(
    path: Path | str,
    *,
    segment_model: SegmentModel | int | None = None,
    settings: Settings | None = None,
) -> list[FitRow]:
    """Fit every curve in the file at ``path``; one row (keys :data:`FIT_COLUMNS`) per curve.

    Rows come in file-curve order (stage, then segment). A file that is not a readable curve table
    raises :class:`~reporting.errors.InputError` / ``InputErrors``; problems of single curves are
    rows with their status and the reasons in ``problems``.
    """
    settings = settings or default_settings()
    curve_set = load_curves(path, segment_model=segment_model, settings=settings)
    fits, unassigned = fit_curve_set(curve_set, settings)
    rows: dict[tuple[str, int], FitRow] = {}
    for fit in fits:
        rows[(fit.stage.value, fit.number)] = {
            "stage": fit.stage.value,
            "segment": fit.number,
            "status": fit.status.value,
            "frames": fit.frames,
            "pre_flash_frames_excluded": fit.pre_flash_frames_excluded,
            "A": fit.A,
            "beta": fit.beta,
            "C": fit.C,
            "A_beta": fit.A_beta,
            "r_squared": fit.r_squared,
            "time_to_90_percent_s": fit.time_to_90_percent_s,
            "residual_sum_of_squares": fit.residual_sum_of_squares,
            "problems": "; ".join(f"{p.location}: {p.detail}" for p in fit.problems),
        }
    for curve in curve_set.curves:
        key = (curve.stage_label, curve.segment)
        if key not in rows:
            rows[key] = {
                "stage": curve.stage_label,
                "segment": curve.segment,
                "status": curve.problems[0].reason.value,
                "frames": int(curve.time_s.size),
                "pre_flash_frames_excluded": curve.pre_flash_frames,
                **dict.fromkeys(FIT_COLUMNS[5:12]),
                "problems": "; ".join(f"{p.location}: {p.detail}" for p in curve.problems),
            }
    assert len(rows) == len(fits) + len(unassigned)
    return [rows[(c.stage_label, c.segment)] for c in curve_set.curves]


def fits_csv_text(rows: Sequence[FitRow]) -> str:
    """Rows of :func:`fit_curve_file` as CSV text (header first; empty cells for no value)."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(FIT_COLUMNS)
    for row in rows:
        writer.writerow(["" if row[c] is None else _cell(row[c]) for c in FIT_COLUMNS])
    return out.getvalue()


def _cell(value: str | int | float | None) -> str:
    if isinstance(value, float):
        return repr(value)  # shortest text that reads back to the same float
    return str(value)
