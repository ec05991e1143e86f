"""Legends of the bull's-eye maps: one entry per colour, mark or line a map of a given kind uses.

Shared by the standalone SVG maps (a legend under each map) and the PDF (one legend strip per kind).
"""

from __future__ import annotations

from dataclasses import dataclass

from reportlab.lib.colors import Color
from reportlab.pdfbase.pdfmetrics import stringWidth

from reporting.render import palette
from reporting.render.fonts import MAP_FONTS, Fonts
from reporting.render.scheme import (
    PERFUSION_WORDS,
    RESERVE_ADEQUATE,
    RESERVE_LOW,
    RESPONSE_STYLE,
    TERRITORY_FILL,
    WALL_MOTION_WORDS,
    MapKind,
    perfusion_fill,
    wall_motion_fill,
)
from reporting.render.shapes import Drawing, Line, Path, Rect, String
from reporting.results import Analysis
from reporting.segments import Territory


@dataclass(frozen=True)
class LegendItem:
    fill: Color | None
    mark: str
    hatched: bool
    text: str
    line: bool = False


def legend_items(analysis: Analysis, kind: MapKind) -> list[LegendItem]:
    """The legend entries of a map of ``kind``."""
    seen = LegendItem(palette.NOT_SEEN_FILL, "x", True, "not visualised")
    boundary = LegendItem(None, "", False, "territory boundary", line=True)
    if kind is MapKind.SEGMENTS:
        items = [LegendItem(TERRITORY_FILL[t], "", False, t.value) for t in Territory]
    elif kind is MapKind.WALL_MOTION:
        scale = range(1, analysis.wall_motion_scale + 1)
        items = [
            LegendItem(wall_motion_fill(s), str(s), False, WALL_MOTION_WORDS[s]) for s in scale
        ]
        items.append(seen)
    elif kind is MapKind.RESERVE:
        items = [
            LegendItem(RESERVE_ADEQUATE, "", False, "A·β reserve at or above cut-off"),
            LegendItem(RESERVE_LOW, "", False, "below cut-off"),
            LegendItem(palette.NOT_SEEN_FILL, "x", True, "no good fit"),
        ]
    elif kind is MapKind.CHANGE:
        from reporting.render.change_map import CHANGE_STYLE, NOT_COMPARED_WORDS

        items = [
            LegendItem(palette.hex_color(fill), mark, False, words)
            for fill, mark, words in CHANGE_STYLE.values()
        ]
        items.append(LegendItem(palette.NOT_SEEN_FILL, "x", True, NOT_COMPARED_WORDS))
    elif kind is MapKind.PERFUSION:
        items = [
            LegendItem(perfusion_fill(s), str(s), False, w) for s, w in PERFUSION_WORDS.items()
        ]
        items.append(seen)
    else:
        items = [
            LegendItem(palette.hex_color(fill), mark, False, words)
            for fill, mark, words in RESPONSE_STYLE.values()
        ]
        items.append(LegendItem(palette.NOT_SEEN_FILL, "x", True, "not assessable"))
    return [*items, boundary]


def draw_legend(
    items: list[LegendItem],
    width: float,
    fonts: Fonts = MAP_FONTS,
    size: float = 6.5,
    label: str | None = None,
) -> Drawing:
    """Legend entries laid out left to right, wrapping within ``width``, after an optional label."""

    box = size * 1.5
    row_height = box + 3
    placed: list[tuple[float, int, LegendItem]] = []
    indent = stringWidth(label, fonts.bold, size) + 6 if label else 0.0
    x, row = indent, 0
    for item in items:
        item_width = box + 3 + stringWidth(item.text, fonts.regular, size) + 9
        if x > indent and x + item_width > width:
            x, row = indent, row + 1
        placed.append((x, row, item))
        x += item_width
    rows = row + 1
    drawing = Drawing(width, rows * row_height)
    if label:
        drawing.add(
            String(
                0,
                (rows - 1) * row_height + 1.5 + box * 0.28,
                label,
                fontName=fonts.bold,
                fontSize=size,
                fillColor=palette.INK,
            )
        )
    for x, r, item in placed:
        y = (rows - 1 - r) * row_height + 1.5
        if item.line:
            drawing.add(
                Line(x, y + box / 2, x + box, y + box / 2, strokeColor=palette.INK, strokeWidth=1.8)
            )
        else:
            drawing.add(
                Rect(x, y, box, box, fillColor=item.fill, strokeColor=palette.RULE, strokeWidth=0.5)
            )
            if item.hatched:
                # the same 45° hatch as a not-visualised sector
                hatch = Path(strokeColor=palette.MUTED, strokeWidth=0.45, fillColor=None)
                for k in range(-3, 4):
                    c = box * k / 4
                    hatch.moveTo(x + max(0.0, -c), y + max(0.0, c))
                    hatch.lineTo(x + box - max(0.0, c), y + box - max(0.0, -c))
                drawing.add(hatch)
            if item.mark:
                fill = item.fill or palette.WHITE
                drawing.add(
                    String(
                        x + box / 2,
                        y + box * 0.28,
                        item.mark,
                        fontName=fonts.bold,
                        fontSize=size,
                        fillColor=palette.text_on(fill) if not item.hatched else palette.INK,
                        textAnchor="middle",
                    )
                )
        drawing.add(
            String(
                x + box + 3,
                y + box * 0.28,
                item.text,
                fontName=fonts.regular,
                fontSize=size,
                fillColor=palette.INK,
            )
        )
    return drawing
