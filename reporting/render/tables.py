"""The PDF's data tables: WMSI and findings per territory, haemodynamics and LV function per stage,
and the exercise-test results of a treadmill or bicycle study.

Cells hold computed text; a cell becomes a wrapping Paragraph only when its text is wider than the
column, which keeps table layout cheap. Any text that reaches Paragraph markup is escaped first.
Heart rates as % of the predicted maximum are printed rounded down, as in the narrative.
"""

from __future__ import annotations

from typing import Any

from reportlab.lib.styles import ParagraphStyle
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.platypus import Flowable, Table, TableStyle

from reporting.model import Stage
from reporting.render import diagram, narrative, palette
from reporting.render.pdf.styles import dash, paragraph
from reporting.results import Analysis, TerritoryResult, TerritoryStatus
from reporting.segments import Territory
from reporting.wording import number_list


def data_table(
    rows: list[list[str]],
    widths: list[float],
    st: dict[str, ParagraphStyle],
    bold_rows: tuple[int, ...] = (0,),
    bold_first_column: bool = False,
) -> Table:
    """A data table of computed text; a cell becomes a wrapping Paragraph only when it must wrap."""
    regular, bold = st["cell"], st["cell_bold"]
    padding = 3
    cells: list[list[str | Flowable]] = []
    for r, row in enumerate(rows):
        out: list[str | Flowable] = []
        for c, text in enumerate(row):
            is_bold = r in bold_rows or r - len(rows) in bold_rows or (bold_first_column and c == 0)
            ps = bold if is_bold else regular
            if stringWidth(text, ps.fontName, ps.fontSize) <= widths[c] - 2 * padding:
                out.append(text)
            else:
                out.append(paragraph(text, ps))
        cells.append(out)
    table = Table(cells, colWidths=widths, repeatRows=1, hAlign="LEFT")
    commands: list[tuple[Any, ...]] = [
        ("FONT", (0, 0), (-1, -1), regular.fontName, regular.fontSize, regular.leading),
        ("TEXTCOLOR", (0, 0), (-1, -1), palette.INK),
        ("BACKGROUND", (0, 0), (-1, 0), palette.PANEL),
        ("LINEBELOW", (0, 0), (-1, 0), 0.8, palette.INK),
        ("LINEBELOW", (0, 1), (-1, -1), 0.3, palette.RULE),
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("LEFTPADDING", (0, 0), (-1, -1), padding),
        ("RIGHTPADDING", (0, 0), (-1, -1), padding),
        ("TOPPADDING", (0, 0), (-1, -1), 2),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 2.5),
    ]
    for r in bold_rows:
        commands.append(("FONT", (0, r), (-1, r), bold.fontName, bold.fontSize, bold.leading))
        commands.append(("VALIGN", (0, r), (-1, r), "TOP"))
    if bold_first_column:
        commands.append(("FONT", (0, 0), (0, -1), bold.fontName, bold.fontSize, bold.leading))
    table.setStyle(TableStyle(commands))
    return table


def territory_table(
    analysis: Analysis,
    width: float,
    st: dict[str, ParagraphStyle],
    *,
    one_wmsi_column: bool = False,
) -> Table:
    """WMSI and findings per territory. ``one_wmsi_column``: the stages were all normal (one map
    stands for them), so one WMSI column stands for every stage too."""
    stages = [s for s in analysis.stages if s in analysis.segments[0].wall_motion]
    titles = [f"WMSI {diagram.stage_title(s, analysis.protocol)}" for s in stages]
    if one_wmsi_column and stages:
        stages, titles = stages[:1], ["WMSI, every stage"]
    perfusion = analysis.perfusion.scored
    head = ["Territory", "Segments", *titles, "Ischaemic segments"]
    if perfusion:
        head.append("Perfusion defects")
    kinetics = analysis.kinetics.territory_reserve if analysis.kinetics else None
    if kinetics is not None:
        head.append("Flow reserve (A·β)")
    rows: list[list[str]] = [head]
    for territory in Territory:
        t = analysis.territories[territory]
        cells = [territory.value, number_list(t.segments) or "none under this map"]
        cells += [_fmt(t.wmsi.get(s)) for s in stages]
        cells.append(_ischemic_cell(t))
        if perfusion:
            parts = []
            if t.reversible_perfusion_segments:
                parts.append(f"reversible {number_list(t.reversible_perfusion_segments)}")
            if t.fixed_perfusion_segments:
                parts.append(f"fixed {number_list(t.fixed_perfusion_segments)}")
            cells.append("; ".join(parts) or "none")
        if kinetics is not None:
            reserve = kinetics.get(territory)
            value = reserve.A_beta_reserve if reserve is not None else None
            low = " (low)" if reserve is not None and reserve.flags else ""
            cells.append("–" if value is None else f"{value:.2f}{low}")
        rows.append(cells)
    glob = [
        "Whole LV",
        f"{len(analysis.segments)} segments",
        *[_fmt(analysis.wmsi.get(s)) for s in stages],
    ]
    glob.append(str(len(analysis.conclusion.ischemic_segments)))
    if perfusion:
        glob.append(
            f"{len(analysis.perfusion.reversible_segments) + len(analysis.perfusion.partially_reversible_segments)} reversible, {len(analysis.perfusion.fixed_segments)} fixed"
        )
    if kinetics is not None:
        glob.append("")
    rows.append(glob)
    fixed = [0.11, 0.19] + [0.09] * len(stages) if not one_wmsi_column else [0.2, 0.32, 0.2]
    if kinetics is not None:
        fixed.append(0.13)
    rest = 1 - sum(fixed)
    widths = [f * width for f in fixed[: 2 + len(stages)]]
    widths += [rest * 0.5 * width] * 2 if perfusion else [rest * width]
    if kinetics is not None:
        widths.append(fixed[-1] * width)
    return data_table(rows, widths, st, bold_rows=(0, -1), bold_first_column=True)


def _ischemic_cell(t: TerritoryResult) -> str:
    """Wall-motion ischaemic segments, then perfusion-only ones, or the territory's status."""
    if t.status is TerritoryStatus.NON_DIAGNOSTIC:
        return "non-diagnostic (not seen at baseline and stress)"
    parts = [number_list(t.ischemic_segments)] if t.ischemic_segments else []
    if t.ischemic_perfusion_segments:
        parts.append(f"{number_list(t.ischemic_perfusion_segments)} (perfusion)")
    return "; ".join(parts) or "none"


def _fmt(value: float | None) -> str:
    return "–" if value is None else f"{value:.2f}"


def haemodynamics_table(analysis: Analysis, width: float, st: dict[str, ParagraphStyle]) -> Table:
    h = analysis.haemodynamics
    stages = [s for s in analysis.stages if s in h]
    dose = any(h[s].dose_ug_kg_min is not None or h[s].atropine_mg is not None for s in stages)
    lvef = any(h[s].lvef_percent is not None for s in stages)
    esv = any(h[s].lv_esv_ml is not None for s in stages)
    head = ["Stage"]
    if dose:
        head.append("Dobutamine / atropine")
    # % of predicted is a stress criterion: not shown at rest, nor for vasodilator stress (common practice)
    percent = analysis.stress.heart_rate_target_applies
    head += ["Heart rate (bpm)", *(["% of predicted"] if percent else []), "BP (mmHg)"]
    head.append("Rate–pressure product")
    if lvef:
        head.append("LVEF (%)")
    if esv:
        head.append("LV ESV (mL)")
    rows: list[list[str]] = [head]
    for s in stages:
        d = h[s]
        cells = [diagram.stage_title(s, analysis.protocol).capitalize()]
        if dose:
            parts = []
            if d.dose_ug_kg_min is not None:
                parts.append(f"{d.dose_ug_kg_min:g} μg/kg/min")
            if d.atropine_mg:
                parts.append(f"atropine {d.atropine_mg:g} mg")
            cells.append(", ".join(parts) or "–")
        bp = (
            f"{d.systolic_bp_mmhg}/{d.diastolic_bp_mmhg}"
            if d.systolic_bp_mmhg is not None and d.diastolic_bp_mmhg is not None
            else dash(d.systolic_bp_mmhg)
        )
        cells.append(dash(d.heart_rate_bpm))
        if percent:
            cells.append(_percent_cell(s, d.hr_percent_of_predicted))
        cells += [bp, dash(d.rate_pressure_product)]
        if lvef:
            cells.append("–" if d.lvef_percent is None else f"{d.lvef_percent:g}")
        if esv:
            cells.append("–" if d.lv_esv_ml is None else f"{d.lv_esv_ml:g}")
        rows.append(cells)
    weights = [1.0] + ([2.4] if dose else []) + [1.0] * (3 if percent else 2) + [1.3]
    weights += [0.9] * (lvef + esv)
    return data_table(rows, [w / sum(weights) * width for w in weights], st)


def _percent_cell(stage: Stage, percent: float | None) -> str:
    """% of the predicted maximum at a stress stage; a dash at rest, where it is no criterion."""
    if percent is None or stage is Stage.REST:
        return "–"
    return f"{narrative.shown_percent(percent)} %"


def exercise_table(analysis: Analysis, width: float, st: dict[str, ParagraphStyle]) -> Table | None:
    """One row of exercise-test results (time, ST, angina, heart-rate recovery, Duke score, METs).

    Only the columns with a value; ``None`` when the study recorded no exercise test. Duke treadmill
    score: Mark DB et al., NEJM 1991;325:849; heart-rate recovery: the cut-off in the record (≤ 18 bpm in
    stress echo, Watanabe J et al., Circulation 2001;104:1911).
    """
    s = analysis.stress
    columns: list[tuple[str, str, float]] = []
    if s.exercise_duration_min is not None:
        columns.append(("Exercise time", f"{s.exercise_duration_min:g} min", 1.0))
    if s.max_st_deviation_mm is not None:
        columns.append(("Max ST deviation", f"{s.max_st_deviation_mm:g} mm", 1.2))
    if s.angina_index is not None:
        columns.append(("Angina index", f"{s.angina_index} – {ANGINA_SHORT[s.angina_index]}", 1.2))
    if s.hr_recovery_1min_bpm is not None:
        verdict = {True: " (abnormal", False: " (normal", None: ""}[s.hr_recovery_abnormal]
        if verdict and s.hr_recovery_abnormal_max_bpm is not None:
            verdict += f", cut-off ≤ {s.hr_recovery_abnormal_max_bpm:g}"
        verdict += ")" if verdict else ""
        value = f"{narrative.signed(s.hr_recovery_1min_bpm)} bpm{verdict}"
        columns.append(("HR recovery, 1st min", value, 1.5))
    if s.duke_treadmill_score is not None:
        risk = f" ({s.duke_risk.value} risk)" if s.duke_risk is not None else ""
        columns.append(
            ("Duke treadmill score", f"{narrative.signed(s.duke_treadmill_score)}{risk}", 1.5)
        )
    if s.mets is not None:
        columns.append(("Workload", f"{s.mets:g} METs", 0.9))
    if not columns:
        return None
    total = sum(w for _, _, w in columns)
    rows = [[head for head, _, _ in columns], [value for _, value, _ in columns]]
    return data_table(rows, [w / total * width for _, _, w in columns], st)


ANGINA_SHORT = {0: "none", 1: "non-limiting", 2: "exercise-limiting"}
