"""One segment's panel of the curve grid: its frame, the post-flash frames of each stage as markers,
the fitted curve y(t) = A(1 − e^(−βt)) + C, the β and R² line of each fit and, for a fit whose status
is not 'ok', a hatched grey plot and the status in words.

Each stage has its own Okabe–Ito colour (:mod:`reporting.render.scheme`), marker shape and line
style, so rest and peak stay apart when printed in greyscale. Plain reportlab shapes only.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from reportlab.lib.colors import Color
from reportlab.pdfbase.pdfmetrics import stringWidth

from reporting.kinetics.models import FitStatus
from reporting.model import Stage
from reporting.render import palette, safe_text
from reporting.render.curves.blocks import Panel
from reporting.render.curves.words import stat_text, status_badge
from reporting.render.fonts import MAP_FONTS, Fonts
from reporting.render.scheme import CURVE_STAGE_COLOUR
from reporting.render.shapes import Group, Line, Path, PolyLine, Rect, String

PANEL_MIN_WIDTH = 92.0
PANEL_HEIGHT = 100.0
STAT_LINE = 6.6
CURVE_SAMPLES = 24
MARKER_RADIUS = 1.35
HATCH_SPACING = 3.2
FLAGGED_FILL = palette.hex_color("#ebebeb")
HATCH_COLOUR = palette.hex_color("#bdbdbd")


@dataclass(frozen=True)
class StageLook:
    """How one stage's data points and fitted curve are drawn."""

    colour: Color
    marker: str  # circle (open), square (filled), triangle (open), diamond (filled)
    dash: tuple[float, ...] | None


# Open circles on a dashed line at rest, filled squares on a solid line at peak: apart in greyscale.
STAGE_LOOK = {
    Stage.REST: StageLook(CURVE_STAGE_COLOUR[Stage.REST], "circle", (2.4, 1.6)),
    Stage.LOW_DOSE: StageLook(CURVE_STAGE_COLOUR[Stage.LOW_DOSE], "triangle", (0.8, 1.2)),
    Stage.PEAK: StageLook(CURVE_STAGE_COLOUR[Stage.PEAK], "square", None),
    Stage.RECOVERY: StageLook(CURVE_STAGE_COLOUR[Stage.RECOVERY], "diamond", (3.0, 1.2, 0.8, 1.2)),
}


def nice_top(value: float) -> float:
    """The smallest 1, 1.5, 2, 2.5, 3, 4, 5, 6 or 8 × 10^k at or above ``value``."""
    if value <= 0:
        return 1.0
    scale = 10.0 ** math.floor(math.log10(value))
    return next(m * scale for m in (1, 1.5, 2, 2.5, 3, 4, 5, 6, 8, 10) if m * scale >= value)


def draw_panel(
    panel: Panel,
    x: float,
    y: float,
    w: float,
    h: float,
    axis: tuple[float, float],
    lines: int,
    fonts: Fonts = MAP_FONTS,
) -> Group:
    """One segment's panel with its lower-left corner at (x, y): title, plot, one stat line per fit."""
    group = Group()
    flagged = panel.flagged
    group.add(
        Rect(
            x,
            y,
            w,
            h,
            fillColor=palette.WHITE,
            strokeColor=palette.MUTED if flagged else palette.RULE,
            strokeWidth=0.9 if flagged else 0.5,
        )
    )
    seg = panel.segment
    title = fit_text(f"{seg.number} {seg.name}", fonts.bold, 6.4, w - 6)
    group.add(
        String(x + 3, y + h - 8.5, title, fontName=fonts.bold, fontSize=6.4, fillColor=palette.INK)
    )

    # plot area
    x0, x1 = x + 14, x + w - 5
    y0 = y + 3 + lines * STAT_LINE + 8
    y1 = y + h - 14
    end, step = axis
    values = [v for f in panel.fits for v in f.intensity if v is not None]
    values += [f.A + f.C for f in panel.fits if f.A is not None and f.C is not None]
    low = min(0.0, *values, *(f.C for f in panel.fits if f.C is not None)) if values else 0.0
    top = nice_top(max(values, default=1.0))

    def px(t: float) -> float:
        return x0 + (x1 - x0) * min(max(t, 0.0), end) / end

    def py(v: float) -> float:
        return y0 + (y1 - y0) * (v - low) / (top - low)

    if flagged:
        group.add(Rect(x0, y0, x1 - x0, y1 - y0, fillColor=FLAGGED_FILL, strokeColor=None))
        group.add(hatch(x0, y0, x1 - x0, y1 - y0))
    # both axes and their ticks as one path; tick labels: time under the axis, intensity at 0 and top
    axes = Path(strokeColor=palette.MUTED, strokeWidth=0.45, fillColor=None)
    axes.moveTo(x0, y1)
    axes.lineTo(x0, y0)
    axes.lineTo(x1, y0)
    labels: list[tuple[float, float, str, str]] = []
    ticks = round(end / step)
    for i in range(ticks + 1):
        tx = px(i * step)
        axes.moveTo(tx, y0)
        axes.lineTo(tx, y0 - 1.8)
        last = i == ticks
        labels.append(
            (
                tx + 4 if last else tx,
                y0 - 7,
                f"{i * step:g}" + (" s" if last else ""),
                "end" if last else "middle",
            )
        )
    for value in (low, top):
        axes.moveTo(x0 - 1.8, py(value))
        axes.lineTo(x0, py(value))
        labels.append((x0 - 2.5, py(value) - 1.8, f"{value:g}", "end"))
    group.add(axes)
    for lx, ly, text, anchor in labels:
        group.add(
            String(
                lx,
                ly,
                text,
                fontName=fonts.regular,
                fontSize=5,
                fillColor=palette.MUTED,
                textAnchor=anchor,
            )
        )

    for fit in panel.fits:
        look = STAGE_LOOK[fit.stage]
        if fit.A is not None and fit.beta is not None and fit.C is not None:
            a, beta, c = fit.A, fit.beta, fit.C
            last_t = min(max(fit.time_s, default=end), end)
            # samples crowd towards t = 0, where the curve bends most
            times = [last_t * (i / CURVE_SAMPLES) ** 2 for i in range(CURVE_SAMPLES + 1)]
            points = [v for t in times for v in (px(t), py(a * (1 - math.exp(-beta * t)) + c))]
            group.add(
                PolyLine(
                    points,
                    strokeColor=look.colour,
                    strokeWidth=0.9,
                    strokeDashArray=list(look.dash) if look.dash else None,
                    strokeLineJoin=1,
                )
            )
        shown = [
            (px(t), py(v))
            for t, v in zip(fit.time_s, fit.intensity, strict=True)
            if v is not None and t <= end + 1e-9
        ]
        if shown:
            group.add(markers(look, shown, MARKER_RADIUS))

    # status words for fits that are not 'ok', on a white backing at the plot's lower right
    for i, fit in enumerate(flagged):
        text, size = shrink(status_badge(fit, fonts), fonts.bold, 5.6, x1 - x0 - 6)
        tw = stringWidth(text, fonts.bold, size)
        bx, by = x1 - tw - 3, y0 + 2 + i * 8.6
        group.add(
            Rect(
                bx - 1.5,
                by - 1.2,
                tw + 3,
                size + 2,
                fillColor=palette.WHITE,
                strokeColor=palette.INK,
                strokeWidth=0.4,
            )
        )
        group.add(
            String(bx, by + 0.4, text, fontName=fonts.bold, fontSize=size, fillColor=palette.INK)
        )

    # one line per fit: a key (line and marker) and β, R²
    for i, fit in enumerate(panel.fits):
        ly = y + 3 + (lines - 1 - i) * STAT_LINE
        look = STAGE_LOOK[fit.stage]
        group.add(
            Line(
                x + 3,
                ly + 1.8,
                x + 12,
                ly + 1.8,
                strokeColor=look.colour,
                strokeWidth=0.9,
                strokeDashArray=list(look.dash) if look.dash else None,
            )
        )
        group.add(markers(look, [(x + 7.5, ly + 1.8)], MARKER_RADIUS))
        bad = fit.status is not FitStatus.OK
        font = fonts.bold if bad else fonts.regular
        text, size = shrink(stat_text(fit, fonts), font, 5.4, w - 18)
        group.add(String(x + 15, ly, text, fontName=font, fontSize=size, fillColor=palette.INK))
    return group


_OCTAGON = [(math.cos(i * math.pi / 4), math.sin(i * math.pi / 4)) for i in range(8)]


def markers(look: StageLook, points: Sequence[tuple[float, float]], r: float) -> Path:
    """Every data point of one stage as one path of small closed shapes (cheap to build and draw)."""
    hollow = look.marker in ("circle", "triangle")
    path = Path(
        fillColor=palette.WHITE if hollow else look.colour,
        strokeColor=look.colour if hollow else None,
        strokeWidth=0.6,
    )
    for x, y in points:
        if look.marker == "circle":
            # an octagon: round at this size, and far fewer numbers in the page than Bézier arcs
            path.moveTo(x + r, y)
            for dx, dy in _OCTAGON[1:]:
                path.lineTo(x + r * dx, y + r * dy)
        elif look.marker == "square":
            path.moveTo(x - r, y - r)
            path.lineTo(x + r, y - r)
            path.lineTo(x + r, y + r)
            path.lineTo(x - r, y + r)
        elif look.marker == "triangle":
            path.moveTo(x - r * 1.1, y - r * 0.9)
            path.lineTo(x + r * 1.1, y - r * 0.9)
            path.lineTo(x, y + r * 1.2)
        else:
            path.moveTo(x, y - r * 1.3)
            path.lineTo(x + r * 1.1, y)
            path.lineTo(x, y + r * 1.3)
            path.lineTo(x - r * 1.1, y)
        path.closePath()
    return path


def hatch(x: float, y: float, w: float, h: float) -> Path:
    """45° lines across the rectangle (x, y, w, h), clipped to it."""
    path = Path(strokeColor=HATCH_COLOUR, strokeWidth=0.4, fillColor=None)
    c = -h + HATCH_SPACING
    while c < w:
        # the line u − v = c in the rectangle's own coordinates (u across, v up)
        u0, v0 = max(0.0, c), max(0.0, -c)
        u1, v1 = min(w, h + c), min(h, w - c)
        path.moveTo(x + u0, y + v0)
        path.lineTo(x + u1, y + v1)
        c += HATCH_SPACING
    return path


def shrink(
    text: str, font: str, size: float, width: float, smallest: float = 4.2
) -> tuple[str, float]:
    """``text`` and a font size at which it fits ``width``: smaller down to ``smallest``, then cut."""
    text = safe_text.printable(text, font)
    natural = stringWidth(text, font, size)
    if natural <= width:
        return text, size
    size = max(smallest, size * width / natural)
    return fit_text(text, font, size, width), size


def fit_text(text: str, font: str, size: float, width: float) -> str:
    """``text`` cut with an ellipsis to ``width`` points."""
    text = safe_text.printable(text, font)
    if stringWidth(text, font, size) <= width:
        return text
    while text and stringWidth(text + "…", font, size) > width:
        text = text[:-1]
    return text.rstrip() + "…"
