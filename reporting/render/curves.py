"""Fitted replenishment curves as a compact grid of small panels, for the referring-doctor PDF.

One panel per segment with a curve, grouped by coronary territory under the map the analysis used:
the post-flash frames of each stage and the fitted curve y(t) = A(1 − e^(−βt)) + C (Wei K et al.,
Circulation 1998;97:473; offset C: Vogel R et al., JACC 2005;45:754), with β and R² printed small.
Each stage has its own Okabe–Ito colour (:mod:`reporting.render.scheme`), marker shape and line
style, so rest and peak stay apart when printed in greyscale. A panel holding a fit whose status is
not 'ok' (poor fit, β at a search bound, no replenishment, bad data) gets a hatched grey background
and the status in words: such fits are left out of the reserve.

Plain reportlab shapes only (no chart widgets), so the PDF stays byte-stable in invariant mode; the
grid reads the typed Analysis and nothing else.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from reportlab.graphics.shapes import (
    Drawing,
    Group,
    Line,
    Path,
    PolyLine,
    Rect,
    String,
)
from reportlab.lib.colors import Color
from reportlab.pdfbase.pdfmetrics import stringWidth

from reporting.kinetics.models import FitStatus, ReserveFlag, SegmentFit, TerritoryReserve
from reporting.model import STAGE_ORDER, Stage
from reporting.render import style
from reporting.render.scheme import CURVE_STAGE_COLOUR, TERRITORY_FILL
from reporting.render.style import MAP_FONTS, Fonts
from reporting.results import Analysis, SegmentResult
from reporting.segments import Territory

PANEL_MIN_WIDTH = 92.0
PANEL_HEIGHT = 100.0
GAP = 6.0
HEADING_HEIGHT = 15.0
STAT_LINE = 6.6
CURVE_SAMPLES = 24
MARKER_RADIUS = 1.35
HATCH_SPACING = 3.2
FLAGGED_FILL = style.hex_color("#ebebeb")
HATCH_COLOUR = style.hex_color("#bdbdbd")

STAGE_WORDS = {
    Stage.REST: "rest",
    Stage.LOW_DOSE: "low dose",
    Stage.PEAK: "peak",
    Stage.RECOVERY: "recovery",
}
STATUS_WORDS = {
    FitStatus.OK: "ok",
    FitStatus.POOR_FIT: "poor fit",
    FitStatus.BETA_AT_BOUND: "β at bound",
    FitStatus.NO_REPLENISHMENT: "no replenishment",
    FitStatus.TOO_FEW_FRAMES: "too few frames",
    FitStatus.DUPLICATE_TIMES: "duplicate times",
    FitStatus.MISSING_INTENSITY: "missing intensity",
    FitStatus.NEGATIVE_INTENSITY: "negative intensity",
    FitStatus.CONSTANT_INTENSITY: "constant intensity",
    FitStatus.UNKNOWN_SEGMENT: "unknown segment",
    FitStatus.UNKNOWN_STAGE: "unknown stage",
}


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


# --- what the grid shows ----------------------------------------------------------------------


@dataclass(frozen=True)
class Panel:
    """One segment's fits, in stage order."""

    segment: SegmentResult
    fits: tuple[SegmentFit, ...]

    @property
    def flagged(self) -> tuple[SegmentFit, ...]:
        """Fits whose status is not 'ok' (left out of the reserve)."""
        return tuple(f for f in self.fits if f.status is not FitStatus.OK)


@dataclass(frozen=True)
class TerritoryBlock:
    """The panels of one territory, with its reserve and the segments that had no curve."""

    territory: Territory
    panels: tuple[Panel, ...]
    without_curves: tuple[int, ...]
    reserve: TerritoryReserve | None


def curve_blocks(analysis: Analysis) -> list[TerritoryBlock]:
    """One block per territory with at least one fitted segment, in LAD, LCx, RCA order."""
    kinetics = analysis.kinetics
    if kinetics is None:
        return []
    by_segment: dict[int, list[SegmentFit]] = {}
    for fit in kinetics.segments:
        by_segment.setdefault(fit.number, []).append(fit)
    blocks = []
    for territory in Territory:
        mine = [s for s in analysis.segments if s.territory is territory]
        panels = tuple(
            Panel(s, tuple(sorted(by_segment[s.number], key=lambda f: STAGE_ORDER.index(f.stage))))
            for s in mine
            if s.number in by_segment
        )
        if panels:
            missing = tuple(s.number for s in mine if s.number not in by_segment)
            reserve = kinetics.territory_reserve.get(territory)
            blocks.append(TerritoryBlock(territory, panels, missing, reserve))
    return blocks


def caption(analysis: Analysis, fonts: Fonts = MAP_FONTS) -> str:
    """The sentence under the section heading: what the panels show."""
    beta = _glyph("β", "beta", fonts.regular)
    return (
        "One panel per segment with a curve, grouped by territory: the frames after the flash "
        f"(markers) and the fitted y(t) = A(1 − e^(−{beta}t)) + C (Wei K et al., Circulation 1998), "
        f"with {beta} (1/s) and R² of each fit. Time in seconds from the flash; intensity in linear "
        "units, each panel on its own scale."
    )


def territory_heading(block: TerritoryBlock, fonts: Fonts = MAP_FONTS) -> str:
    """``segments 1, 2, 7 · territory A·β reserve 1.50 (below cut-off) from 6 segments``."""
    beta = _glyph("β", "beta", fonts.regular)
    numbers = ", ".join(str(p.segment.number) for p in block.panels)
    parts = [f"segment{'s' if len(block.panels) != 1 else ''} {numbers}"]
    r = block.reserve
    if r is not None and r.count and r.A_beta_reserve is not None:
        low = " (below cut-off)" if ReserveFlag.LOW_FLOW_RESERVE in r.flags else ""
        plural = "s" if r.count != 1 else ""
        parts.append(
            f"territory A·{beta} reserve {r.A_beta_reserve:.2f}{low} from {r.count} segment{plural}"
        )
    else:
        parts.append("no territory reserve (no segment with good fits at rest and stress)")
    if block.without_curves:
        parts.append(f"no curve for {', '.join(str(n) for n in block.without_curves)}")
    return " · ".join(parts)


def stat_text(fit: SegmentFit, fonts: Fonts = MAP_FONTS) -> str:
    """``peak β 2.16 R² 0.97``; ``peak: not fitted`` (the badge in the plot says why)."""
    stage = STAGE_WORDS[fit.stage]
    if fit.beta is None or fit.r_squared is None:
        return f"{stage}: not fitted"
    beta = _glyph("β", "beta", fonts.regular)
    return f"{stage} {beta} {fit.beta:.2f}  R² {fit.r_squared:.2f}"


def status_badge(fit: SegmentFit, fonts: Fonts = MAP_FONTS) -> str:
    """``peak: poor fit``: the words shown on a panel whose fit is not 'ok'."""
    words = STATUS_WORDS[fit.status]
    if fit.status is FitStatus.BETA_AT_BOUND:
        words = words.replace("β", _glyph("β", "beta", fonts.bold))
    return f"{STAGE_WORDS[fit.stage]}: {words}"


# --- layout -----------------------------------------------------------------------------------


def columns(width: float) -> int:
    """Panels per row that fit ``width`` at the minimum panel width."""
    return max(1, int((width + GAP) // (PANEL_MIN_WIDTH + GAP)))


def time_axis(analysis: Analysis) -> tuple[float, float]:
    """(end, tick step) of the time axis shared by every panel, in seconds."""
    times = [t for f in analysis.kinetics.segments for t in f.time_s] if analysis.kinetics else []
    end = max(times, default=0.0)
    if end <= 0:
        return 10.0, 5.0
    step = next(s for s in (0.5, 1, 2, 5, 10, 20, 50, 100, 200, 500, 1e9) if end / s <= 4)
    return math.ceil(end / step - 1e-9) * step, step


def nice_top(value: float) -> float:
    """The smallest 1, 1.5, 2, 2.5, 3, 4, 5, 6 or 8 × 10^k at or above ``value``."""
    if value <= 0:
        return 1.0
    scale = 10.0 ** math.floor(math.log10(value))
    return next(m * scale for m in (1, 1.5, 2, 2.5, 3, 4, 5, 6, 8, 10) if m * scale >= value)


def curve_grid(analysis: Analysis, width: float, fonts: Fonts = MAP_FONTS) -> list[Drawing]:
    """The legend, then one drawing per territory block; empty without kinetics."""
    blocks = curve_blocks(analysis)
    if not blocks:
        return []
    cols = columns(width)
    panel_width = (width - (cols - 1) * GAP) / cols
    lines = max(len(p.fits) for b in blocks for p in b.panels)
    axis = time_axis(analysis)
    stages = [
        s
        for s in STAGE_ORDER
        if any(f.stage is s for b in blocks for p in b.panels for f in p.fits)
    ]
    drawings = [legend(stages, width, fonts)]
    for block in blocks:
        rows = math.ceil(len(block.panels) / cols)
        height = HEADING_HEIGHT + rows * (PANEL_HEIGHT + GAP)
        drawing = Drawing(width, height)
        _heading(drawing, block, width, height, fonts)
        for i, panel in enumerate(block.panels):
            row, col = divmod(i, cols)
            x = col * (panel_width + GAP)
            y = height - HEADING_HEIGHT - (row + 1) * PANEL_HEIGHT - row * GAP
            drawing.add(draw_panel(panel, x, y, panel_width, PANEL_HEIGHT, axis, lines, fonts))
        drawings.append(drawing)
    return drawings


def grid_height(drawings: Sequence[Drawing]) -> float:
    return float(sum(d.height for d in drawings))


# --- drawing ----------------------------------------------------------------------------------


def _heading(
    drawing: Drawing, block: TerritoryBlock, width: float, height: float, fonts: Fonts
) -> None:
    y = height - 10
    drawing.add(
        Rect(
            0,
            y - 1.5,
            9,
            9,
            fillColor=TERRITORY_FILL[block.territory],
            strokeColor=style.RULE,
            strokeWidth=0.5,
        )
    )
    label = block.territory.value
    drawing.add(String(13, y, label, fontName=fonts.bold, fontSize=8, fillColor=style.INK))
    x = 13 + stringWidth(label, fonts.bold, 8) + 6
    text = _fit(territory_heading(block, fonts), fonts.regular, 6.8, width - x)
    drawing.add(String(x, y, text, fontName=fonts.regular, fontSize=6.8, fillColor=style.INK))


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
            fillColor=style.WHITE,
            strokeColor=style.MUTED if flagged else style.RULE,
            strokeWidth=0.9 if flagged else 0.5,
        )
    )
    seg = panel.segment
    title = _fit(f"{seg.number} {seg.name}", fonts.bold, 6.4, w - 6)
    group.add(
        String(x + 3, y + h - 8.5, title, fontName=fonts.bold, fontSize=6.4, fillColor=style.INK)
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
        group.add(_hatch(x0, y0, x1 - x0, y1 - y0))
    # both axes and their ticks as one path; tick labels: time under the axis, intensity at 0 and top
    axes = Path(strokeColor=style.MUTED, strokeWidth=0.45, fillColor=None)
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
                fillColor=style.MUTED,
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
            group.add(_markers(look, shown, MARKER_RADIUS))

    # status words for fits that are not 'ok', on a white backing at the plot's lower right
    for i, fit in enumerate(flagged):
        text, size = _shrink(status_badge(fit, fonts), fonts.bold, 5.6, x1 - x0 - 6)
        tw = stringWidth(text, fonts.bold, size)
        bx, by = x1 - tw - 3, y0 + 2 + i * 8.6
        group.add(
            Rect(
                bx - 1.5,
                by - 1.2,
                tw + 3,
                size + 2,
                fillColor=style.WHITE,
                strokeColor=style.INK,
                strokeWidth=0.4,
            )
        )
        group.add(
            String(bx, by + 0.4, text, fontName=fonts.bold, fontSize=size, fillColor=style.INK)
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
        group.add(_markers(look, [(x + 7.5, ly + 1.8)], MARKER_RADIUS))
        bad = fit.status is not FitStatus.OK
        font = fonts.bold if bad else fonts.regular
        text, size = _shrink(stat_text(fit, fonts), font, 5.4, w - 18)
        group.add(String(x + 15, ly, text, fontName=font, fontSize=size, fillColor=style.INK))
    return group


def legend(stages: Sequence[Stage], width: float, fonts: Fonts = MAP_FONTS) -> Drawing:
    """Key to the panels: each stage's marker and line, and the hatched panel of a rejected fit."""
    size = 6.8
    items: list[tuple[str, Stage | None]] = [
        (f"{STAGE_WORDS[s]}: frames and fitted curve", s) for s in stages
    ]
    items.append(
        ("hatched panel: a fit that is not 'ok' (status in words), left out of reserve", None)
    )
    row_height = 11.0
    placed: list[tuple[float, int, str, Stage | None]] = []
    x, row = 0.0, 0
    for text, stage in items:
        item_width = 16 + stringWidth(text, fonts.regular, size) + 10
        if x > 0 and x + item_width > width:
            x, row = 0.0, row + 1
        placed.append((x, row, text, stage))
        x += item_width
    rows = row + 1
    drawing = Drawing(width, rows * row_height + 2)
    for x, r, text, stage in placed:
        y = (rows - 1 - r) * row_height + 3
        if stage is None:
            drawing.add(
                Rect(
                    x,
                    y - 1,
                    12,
                    8,
                    fillColor=FLAGGED_FILL,
                    strokeColor=style.MUTED,
                    strokeWidth=0.6,
                )
            )
            drawing.add(_hatch(x, y - 1, 12, 8))
        else:
            look = STAGE_LOOK[stage]
            drawing.add(
                Line(
                    x,
                    y + 3,
                    x + 12,
                    y + 3,
                    strokeColor=look.colour,
                    strokeWidth=1.0,
                    strokeDashArray=list(look.dash) if look.dash else None,
                )
            )
            drawing.add(_markers(look, [(x + 6, y + 3)], 1.8))
        drawing.add(
            String(
                x + 16, y + 0.8, text, fontName=fonts.regular, fontSize=size, fillColor=style.INK
            )
        )
    return drawing


_OCTAGON = [(math.cos(i * math.pi / 4), math.sin(i * math.pi / 4)) for i in range(8)]


def _markers(look: StageLook, points: Sequence[tuple[float, float]], r: float) -> Path:
    """Every data point of one stage as one path of small closed shapes (cheap to build and draw)."""
    hollow = look.marker in ("circle", "triangle")
    path = Path(
        fillColor=style.WHITE if hollow else look.colour,
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


def _hatch(x: float, y: float, w: float, h: float) -> Path:
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


def _glyph(text: str, fallback: str, font: str) -> str:
    """``text`` when the font has its glyphs, else the plain ``fallback``."""
    return text if style.printable(text, font) == text else fallback


def _shrink(
    text: str, font: str, size: float, width: float, smallest: float = 4.2
) -> tuple[str, float]:
    """``text`` and a font size at which it fits ``width``: smaller down to ``smallest``, then cut."""
    text = style.printable(text, font)
    natural = stringWidth(text, font, size)
    if natural <= width:
        return text, size
    size = max(smallest, size * width / natural)
    return _fit(text, font, size, width), size


def _fit(text: str, font: str, size: float, width: float) -> str:
    """``text`` cut with an ellipsis to ``width`` points."""
    text = style.printable(text, font)
    if stringWidth(text, font, size) <= width:
        return text
    while text and stringWidth(text + "…", font, size) > width:
        text = text[:-1]
    return text.rstrip() + "…"


__all__ = [
    "Panel",
    "TerritoryBlock",
    "caption",
    "curve_blocks",
    "curve_grid",
    "draw_panel",
    "grid_height",
    "legend",
]
