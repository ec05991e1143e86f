"""The curve grid laid out for a page width: a legend, then one drawing per territory with its
heading line and its panels in rows of as many columns as fit.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from reportlab.pdfbase.pdfmetrics import stringWidth

from reporting.model import STAGE_ORDER, Stage
from reporting.render import palette
from reporting.render.curves.blocks import TerritoryBlock, curve_blocks, time_axis
from reporting.render.curves.panel import (
    FLAGGED_FILL,
    PANEL_HEIGHT,
    PANEL_MIN_WIDTH,
    STAGE_LOOK,
    draw_panel,
    fit_text,
    hatch,
    markers,
)
from reporting.render.curves.words import territory_heading
from reporting.render.fonts import MAP_FONTS, Fonts
from reporting.render.scheme import TERRITORY_FILL
from reporting.render.shapes import Drawing, Line, Rect, String
from reporting.results import Analysis
from reporting.wording import stage_words

GAP = 6.0
HEADING_HEIGHT = 15.0


def columns(width: float) -> int:
    """Panels per row that fit ``width`` at the minimum panel width."""
    return max(1, int((width + GAP) // (PANEL_MIN_WIDTH + GAP)))


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
            strokeColor=palette.RULE,
            strokeWidth=0.5,
        )
    )
    label = block.territory.value
    drawing.add(String(13, y, label, fontName=fonts.bold, fontSize=8, fillColor=palette.INK))
    x = 13 + stringWidth(label, fonts.bold, 8) + 6
    text = fit_text(territory_heading(block, fonts), fonts.regular, 6.8, width - x)
    drawing.add(String(x, y, text, fontName=fonts.regular, fontSize=6.8, fillColor=palette.INK))


def legend(stages: Sequence[Stage], width: float, fonts: Fonts = MAP_FONTS) -> Drawing:
    """Key to the panels: each stage's marker and line, and the hatched panel of a rejected fit."""
    size = 6.8
    items: list[tuple[str, Stage | None]] = [
        (f"{stage_words(s)}: frames and fitted curve", s) for s in stages
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
                    strokeColor=palette.MUTED,
                    strokeWidth=0.6,
                )
            )
            drawing.add(hatch(x, y - 1, 12, 8))
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
            drawing.add(markers(look, [(x + 6, y + 3)], 1.8))
        drawing.add(
            String(
                x + 16, y + 0.8, text, fontName=fonts.regular, fontSize=size, fillColor=palette.INK
            )
        )
    return drawing
