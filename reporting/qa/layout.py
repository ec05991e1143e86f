"""Layout pieces of the quality PDF: table styles and number formatting; the paragraph styles are
the house set of :mod:`reporting.render.paragraph_styles`, shared with the report.

A plain design of our own: black rules above and below each table and under its header, a light panel
behind the four cells of a 2×2 table, bold row labels, one body font (the embedded Unicode family of
:mod:`reporting.render.palette`). Percentages are whole numbers, kappas two decimals; a missing value
prints as "n/a", never as 0.
"""

from __future__ import annotations

from typing import Any

from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.platypus import Flowable, Table, TableStyle

from reporting.qa.agreement import KappaStatistic
from reporting.qa.metrics import Proportion
from reporting.render import palette


def table_style(
    s: dict[str, ParagraphStyle],
    *,
    header_rows: int,
    first_col: bool = False,
    align_numbers: bool = False,
) -> TableStyle:
    font = s["cell"].fontName
    bold = s["h2"].fontName
    commands: list[tuple[Any, ...]] = [
        ("FONT", (0, 0), (-1, -1), font, 8),
        ("FONT", (0, 0), (-1, header_rows - 1), bold, 8),
        ("TEXTCOLOR", (0, 0), (-1, -1), palette.INK),
        ("VALIGN", (0, 0), (-1, -1), "MIDDLE"),
        ("LINEABOVE", (0, 0), (-1, 0), 0.6, palette.INK),
        ("LINEBELOW", (0, header_rows - 1), (-1, header_rows - 1), 0.4, palette.RULE),
        ("LINEBELOW", (0, -1), (-1, -1), 0.6, palette.INK),
        ("TOPPADDING", (0, 0), (-1, -1), 2),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 2),
        ("LEFTPADDING", (0, 0), (-1, -1), 3),
        ("RIGHTPADDING", (0, 0), (-1, -1), 3),
    ]
    if first_col:
        commands.append(("FONT", (0, header_rows), (0, -1), bold, 8))
    if align_numbers:
        commands.append(("ALIGN", (1, 0), (-1, -1), "RIGHT"))
        commands.append(("BACKGROUND", (1, 1), (2, 2), palette.PANEL))
    return TableStyle(commands)


def side_by_side(*parts: Flowable, gap: float = 8 * mm) -> Table:
    cells: list[Any] = []
    widths: list[float] = []
    for i, part in enumerate(parts):
        if i:
            cells.append("")
            widths.append(gap)
        cells.append(part)
        widths.append(sum(getattr(part, "_colWidths", [0.0])) or 40 * mm)
    out = Table([cells], colWidths=widths, hAlign="LEFT")
    out.setStyle(
        TableStyle(
            [
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LEFTPADDING", (0, 0), (-1, -1), 0),
                ("RIGHTPADDING", (0, 0), (-1, -1), 0),
                ("TOPPADDING", (0, 0), (-1, -1), 0),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 0),
            ]
        )
    )
    return out


def percent(value: float | None) -> str:
    return "n/a" if value is None else f"{100 * value:.0f} %"


def plain_percent(value: float | None) -> str:
    return "n/a" if value is None else f"{value:.0f} %"


def interval(p: Proportion) -> str:
    if p.ci_low is None or p.ci_high is None:
        return "n/a"
    return f"{100 * p.ci_low:.0f}–{100 * p.ci_high:.0f} %"


def short(p: Proportion) -> str:
    if p.value is None:
        return f"n/a (0/{p.denominator})"
    return f"{percent(p.value)} ({p.numerator}/{p.denominator})"


def kappa_text(k: KappaStatistic) -> str:
    if k.value is None or k.label is None:
        return "n/a"
    return f"{k.value:.2f} {k.label.value.replace('_', ' ')}"


def number(value: float) -> str:
    return f"{value:g}"
