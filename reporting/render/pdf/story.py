"""The body of the referring-doctor PDF in reading order: header and answer, bull's-eye maps with
their legends, territory, haemodynamic and exercise tables, the narrative, the fitted-curve grid,
the cautions and the sign-off.

The narrative is read back from its plain-text form (:func:`reporting.render.narrative.text_blocks`),
so a lab template changes the PDF too. With time-intensity curves, the grid
(:mod:`reporting.render.curves`) follows the narrative, on a page of its own unless it fits where
the narrative ends.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from reportlab.platypus import CondPageBreak, Flowable, KeepTogether, Spacer, Table, TableStyle

from reporting.model import ReportStatus
from reporting.render import curves, diagram, narrative, palette
from reporting.render.diagram import MapSpec
from reporting.render.fonts import Fonts
from reporting.render.legend import draw_legend, legend_items
from reporting.render.pdf.header import answer_box, header
from reporting.render.pdf.styles import Styles, dash, paragraph, section_heading
from reporting.render.scheme import MapKind
from reporting.render.tables import exercise_table, haemodynamics_table, territory_table
from reporting.render.vector import DrawingFlowable
from reporting.results import Analysis

MAPS_PER_ROW = 4
METHODS_HEADING = "Methods"


def build_story(
    analysis: Analysis,
    width: float,
    st: Styles,
    fonts: Fonts,
    templates_dir: Path | str | None,
) -> list[Flowable]:
    story: list[Flowable] = []
    story += header(analysis, width, st)
    story.append(Spacer(1, 5))
    story.append(answer_box(analysis, width, st))
    story.append(Spacer(1, 6))
    story += _maps(analysis, width, fonts, st)
    story.append(section_heading("Territories", st))
    story.append(territory_table(analysis, width, st))
    story.append(paragraph(f"Territory map: {analysis.territory_map.title}.", st["small"]))
    stress_block: list[Flowable] = [
        section_heading("Haemodynamics and LV function", st),
        haemodynamics_table(analysis, width, st),
    ]
    exercise = exercise_table(analysis, width, st)
    if exercise is not None:
        stress_block += [Spacer(1, 4), exercise]
    story.append(KeepTogether(stress_block))
    text = narrative.narrative_text(
        analysis, templates_dir, include_cautions=False, audience=narrative.Audience.REFERRER
    )
    blocks = narrative.text_blocks(text)
    methods = [b for b in blocks if b[0] == METHODS_HEADING]
    for heading, paragraphs in blocks:
        if heading == METHODS_HEADING:
            continue
        block: list[Flowable] = [section_heading(heading, st)]
        block += [paragraph(p, st["para"]) for p in paragraphs]
        story.append(KeepTogether(block[:2]))
        story += block[2:]
    story += _curves(analysis, width, fonts, st)
    story.append(Spacer(1, 4))
    story.append(
        KeepTogether(
            [
                section_heading("Cautions", st),
                *[paragraph("• " + c, st["small"]) for c in analysis.cautions],
            ]
        )
    )
    for _, paragraphs in methods:  # one line at the end: sources and formulas
        story.append(Spacer(1, 3))
        story += [paragraph(f"{METHODS_HEADING}. {p}", st["small"]) for p in paragraphs]
    story.append(Spacer(1, 8))
    story.append(_sign_off(analysis, width, st))
    return story


def _curves(analysis: Analysis, width: float, fonts: Fonts, st: Styles) -> list[Flowable]:
    """The fitted-curve grid under its heading; nothing without kinetics."""
    drawings = curves.curve_grid(analysis, width, fonts)
    if not drawings:
        return []
    rows = [DrawingFlowable(d) for d in drawings]
    heading = section_heading("Fitted replenishment curves", st)
    intro = paragraph(curves.caption(analysis, fonts), st["small"])
    # the whole grid moves to a new page unless it fits below the narrative
    needed = curves.grid_height(drawings) + 3 * st["h2"].leading + 3 * st["small"].leading
    first = KeepTogether([heading, intro, Spacer(1, 3), *rows[:2]])
    return [CondPageBreak(needed), first, *rows[2:]]


def _maps(analysis: Analysis, width: float, fonts: Fonts, st: Styles) -> list[Flowable]:
    """Rows of up to four maps, each row followed by the legends of the kinds it introduces."""
    specs = diagram.map_specs(analysis)
    cell = width / MAPS_PER_ROW
    radius = min(44.0, cell / 2 - 14)
    out: list[Flowable] = []
    explained: set[MapKind] = set()
    for start in range(0, len(specs), MAPS_PER_ROW):
        row = specs[start : start + MAPS_PER_ROW]
        block: list[Flowable] = [_map_row(analysis, row, cell, radius, fonts)]
        for kind in dict.fromkeys(s.kind for s in row):
            if kind not in explained:
                explained.add(kind)
                block.append(_legend_strip(analysis, kind, width, fonts))
        block.append(Spacer(1, 5))
        out.append(KeepTogether(block))
    return out


def _map_row(
    analysis: Analysis, row: Sequence[MapSpec], cell: float, radius: float, fonts: Fonts
) -> Table:
    drawings = [
        DrawingFlowable(
            diagram.bullseye(analysis, s, radius=radius, legend=False, fonts=fonts, width=cell)
        )
        for s in row
    ]
    table = Table([drawings], colWidths=[cell] * len(row), hAlign="LEFT")
    table.setStyle(
        TableStyle(
            [
                ("LEFTPADDING", (0, 0), (-1, -1), 0),
                ("RIGHTPADDING", (0, 0), (-1, -1), 0),
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
            ]
        )
    )
    return table


LEGEND_LABELS = {
    MapKind.WALL_MOTION: "Wall motion",
    MapKind.SEGMENTS: "Territories",
    MapKind.RESPONSE: "Response",
    MapKind.PERFUSION: "Perfusion",
    MapKind.RESERVE: "Flow reserve",
}


def _legend_strip(analysis: Analysis, kind: MapKind, width: float, fonts: Fonts) -> DrawingFlowable:
    items = legend_items(analysis, kind)
    if kind is not MapKind.SEGMENTS:
        items = [i for i in items if not i.line]
    return DrawingFlowable(
        draw_legend(items, width, fonts, size=6.8, label=LEGEND_LABELS[kind] + ":")
    )


def _sign_off(analysis: Analysis, width: float, st: Styles) -> Flowable:
    study = analysis.study
    if study.report_status is ReportStatus.FINAL:
        status = "Final report, signed by the reading physician."
    else:
        status = "Preliminary report: not yet signed; computed values await physician review."
    rows = [
        [
            paragraph("Reader", st["label"]),
            paragraph(dash(study.reader), st["cell"]),
            paragraph("Signature", st["label"]),
            paragraph("", st["cell"]),
            paragraph("Date", st["label"]),
            paragraph("", st["cell"]),
        ],
    ]
    table = Table(
        rows,
        colWidths=[
            width * 0.08,
            width * 0.32,
            width * 0.1,
            width * 0.28,
            width * 0.06,
            width * 0.16,
        ],
    )
    table.setStyle(
        TableStyle(
            [
                ("LINEBELOW", (1, 0), (1, 0), 0.6, palette.INK),
                ("LINEBELOW", (3, 0), (3, 0), 0.6, palette.INK),
                ("LINEBELOW", (5, 0), (5, 0), 0.6, palette.INK),
                ("VALIGN", (0, 0), (-1, -1), "BOTTOM"),
                ("TOPPADDING", (0, 0), (-1, -1), 14),
                ("LEFTPADDING", (0, 0), (-1, -1), 0),
            ]
        )
    )
    return KeepTogether(
        [
            paragraph(f"Report status: {status}", st["body"]),
            table,
            Spacer(1, 3),
            paragraph(f"Computed by {analysis.generator}.", st["label"]),
        ]
    )
