"""The chart of the quality PDF: sensitivity and specificity with their 95 % intervals.

Drawn with reportlab graphics as one :class:`~reportlab.graphics.shapes.Drawing`: a group per patient
and per territory, a point for each measure and a whisker from the lower to the upper Wilson limit.
Sensitivity and specificity differ in colour (Okabe–Ito blue and vermillion) and in marker shape
(circle, square), so the chart reads in greyscale too. A measure without data shows "n/a".
"""

from __future__ import annotations

from reportlab.lib import colors
from reportlab.lib.units import mm

from reporting.qa.metrics import DiagnosticAccuracy
from reporting.qa.review import QualityReview
from reporting.render import palette
from reporting.render.fonts import Fonts
from reporting.render.shapes import Circle, Drawing, Line, Rect, String
from reporting.segments import Territory

SENSITIVITY_COLOUR = palette.hex_color(palette.OKABE_ITO["blue"])
SPECIFICITY_COLOUR = palette.hex_color(palette.OKABE_ITO["vermillion"])


def accuracy_chart(review: QualityReview, fonts: Fonts, width: float) -> Drawing:
    """Sensitivity (circles) and specificity (squares) per patient and per territory, with whiskers."""
    height = float(52 * mm)
    left, right, bottom, top = 30.0, 110.0, 18.0, 8.0
    plot_w, plot_h = width - left - right, height - bottom - top
    d = Drawing(width, height)
    d.add(
        Rect(
            left, bottom, plot_w, plot_h, fillColor=None, strokeColor=palette.RULE, strokeWidth=0.5
        )
    )

    def y_of(value: float) -> float:
        return bottom + value * plot_h

    for tick in (0.0, 0.25, 0.5, 0.75, 1.0):
        y = y_of(tick)
        d.add(
            Line(
                left,
                y,
                left + plot_w,
                y,
                strokeColor=palette.PANEL if 0 < tick < 1 else palette.RULE,
                strokeWidth=0.5,
            )
        )
        d.add(
            String(
                left - 4,
                y - 2.5,
                f"{tick * 100:.0f} %",
                fontName=fonts.regular,
                fontSize=7,
                fillColor=palette.MUTED,
                textAnchor="end",
            )
        )
    groups: list[tuple[str, DiagnosticAccuracy]] = [("Per patient", review.per_patient)] + [
        (t.value, review.per_territory[t]) for t in Territory
    ]
    slot = plot_w / len(groups)
    for i, (name, table) in enumerate(groups):
        centre = left + slot * (i + 0.5)
        d.add(
            String(
                centre,
                bottom - 11,
                name,
                fontName=fonts.regular,
                fontSize=8,
                fillColor=palette.INK,
                textAnchor="middle",
            )
        )
        for offset, p, colour, marker in (
            (-0.14, table.sensitivity, SENSITIVITY_COLOUR, "circle"),
            (0.14, table.specificity, SPECIFICITY_COLOUR, "square"),
        ):
            x = centre + offset * slot
            if p.value is None or p.ci_low is None or p.ci_high is None:
                d.add(
                    String(
                        x,
                        y_of(0.5),
                        "n/a",
                        fontName=fonts.regular,
                        fontSize=7,
                        fillColor=palette.MUTED,
                        textAnchor="middle",
                    )
                )
                continue
            low, high = y_of(p.ci_low), y_of(p.ci_high)
            d.add(Line(x, low, x, high, strokeColor=colour, strokeWidth=1))
            d.add(Line(x - 3, low, x + 3, low, strokeColor=colour, strokeWidth=1))
            d.add(Line(x - 3, high, x + 3, high, strokeColor=colour, strokeWidth=1))
            d.add(_marker(marker, x, y_of(p.value), colour))
    legend_x = left + plot_w + 14
    for row, (label, colour, marker) in enumerate(
        (
            ("Sensitivity", SENSITIVITY_COLOUR, "circle"),
            ("Specificity", SPECIFICITY_COLOUR, "square"),
        )
    ):
        y = bottom + plot_h - 10 - row * 14
        d.add(_marker(marker, legend_x, y + 2.5, colour))
        d.add(
            String(
                legend_x + 8, y, label, fontName=fonts.regular, fontSize=8, fillColor=palette.INK
            )
        )
    d.add(
        Line(
            legend_x - 3,
            bottom + plot_h - 38,
            legend_x + 3,
            bottom + plot_h - 38,
            strokeColor=palette.MUTED,
        )
    )
    d.add(
        Line(
            legend_x,
            bottom + plot_h - 38,
            legend_x,
            bottom + plot_h - 28,
            strokeColor=palette.MUTED,
        )
    )
    d.add(
        Line(
            legend_x - 3,
            bottom + plot_h - 28,
            legend_x + 3,
            bottom + plot_h - 28,
            strokeColor=palette.MUTED,
        )
    )
    d.add(
        String(
            legend_x + 8,
            bottom + plot_h - 36,
            "95 % interval",
            fontName=fonts.regular,
            fontSize=8,
            fillColor=palette.INK,
        )
    )
    return d


def _marker(kind: str, x: float, y: float, colour: colors.Color) -> Circle | Rect:
    if kind == "circle":
        return Circle(x, y, 3, fillColor=colour, strokeColor=colors.white, strokeWidth=0.5)
    return Rect(x - 3, y - 3, 6, 6, fillColor=colour, strokeColor=colors.white, strokeWidth=0.5)
