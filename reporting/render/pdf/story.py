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

from reportlab.platypus import (
    BalancedColumns,
    CondPageBreak,
    Flowable,
    KeepTogether,
    Spacer,
    Table,
    TableStyle,
)

from reporting.model import ReportStatus
from reporting.render import curves, diagram, narrative, palette
from reporting.render.diagram import MapSpec
from reporting.render.fonts import Fonts
from reporting.render.legend import draw_legend, legend_items
from reporting.render.pdf.comparison import comparison_block
from reporting.render.pdf.header import answer_box, header
from reporting.render.pdf.heading import HeadedParagraph
from reporting.render.pdf.signature import SignatureBlock, signed_block, supersession_note
from reporting.render.pdf.styles import Styles, dash, paragraph, section_heading, sentence
from reporting.render.scheme import MapKind
from reporting.render.tables import exercise_table, haemodynamics_table, territory_table
from reporting.render.vector import DrawingFlowable
from reporting.results import Analysis

MAPS_PER_ROW = 4
MERGED_RADIUS = 34.0
"""Radius (pt) of the maps of a study with nothing abnormal to show, beside the territory table."""
METHODS_HEADING = "Methods"


def build_story(
    analysis: Analysis,
    width: float,
    st: Styles,
    fonts: Fonts,
    templates_dir: Path | str | None,
    signature: SignatureBlock | None = None,
) -> list[Flowable]:
    story: list[Flowable] = []
    story += header(analysis, width, st, signature.status if signature is not None else None)
    if signature is not None:
        story += supersession_note(signature, st)
    story.append(Spacer(1, 5))
    story.append(answer_box(analysis, width, st))
    story.append(Spacer(1, 6))
    specs = diagram.page_map_specs(analysis)
    if len(specs) <= MAPS_PER_ROW // 2 and any(len(s.merged) > 1 for s in specs):
        # nothing abnormal to show: the maps and the territory table share one row
        story.append(_maps_beside_territories(analysis, specs, width, fonts, st))
        story += comparison_block(analysis, width, fonts, st)
    else:
        story += _maps(analysis, specs, width, fonts, st)
        story += comparison_block(analysis, width, fonts, st)
        story += _territories(analysis, width, st)
    stress_block: list[Flowable] = [
        section_heading("Haemodynamics and LV function", st),
        haemodynamics_table(analysis, width, st),
    ]
    exercise = exercise_table(analysis, width, st)
    if exercise is not None:
        stress_block += [Spacer(1, 4), exercise]
    story.append(KeepTogether(stress_block))
    story.append(Spacer(1, 4))
    text = narrative.narrative_text(
        analysis, templates_dir, include_cautions=False, audience=narrative.Audience.REFERRER
    )
    blocks = narrative.text_blocks(text)
    methods = [b for b in blocks if b[0] == METHODS_HEADING]
    # what the header and the answer box already print is not printed twice
    printed = {narrative.summary(analysis), narrative.stress_paragraphs(analysis)[0]}
    text_flow: list[Flowable] = []
    for heading, paragraphs in blocks:
        if heading == METHODS_HEADING:
            continue
        kept = [p for p in paragraphs if p not in printed] or paragraphs
        paras = [paragraph(p, st["para"]) for p in kept]
        # a heading never ends a column: it keeps with its first paragraph
        title = section_heading(heading, st)
        text_flow += [HeadedParagraph(title, paras[0]), *paras[1:]] if paras else [title]
    # the narrative in two balanced columns: short clinical sentences fill half a line better
    story.append(BalancedColumns(text_flow, nCols=2, innerPadding=14, spaceBefore=2))
    story += _curves(analysis, width, fonts, st)
    story.append(Spacer(1, 4))
    cautions: list[Flowable] = [
        paragraph(
            "Cautions. " + " ".join(sentence(c.rstrip(".")) for c in analysis.cautions), st["small"]
        )
    ]
    tail: list[Flowable] = []
    for _, paragraphs in methods:  # one line at the end: sources and formulas
        tail.append(Spacer(1, 3))
        tail += [paragraph(f"{METHODS_HEADING}. {p}", st["fine"]) for p in paragraphs]
    sign_off = (
        _sign_off(analysis, width, st)
        if signature is None
        else [signed_block(signature, width, st)]
    )
    tail += [Spacer(1, 4), *sign_off]
    # the sign-off never stands alone on a page: it keeps with the Methods line before it, or
    # with the cautions when there is none
    if len(tail) > 2:
        story.append(KeepTogether(cautions))
        story.append(KeepTogether(tail))
    else:
        story.append(KeepTogether(cautions + tail))
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


def _territories(
    analysis: Analysis, width: float, st: Styles, *, one_wmsi_column: bool = False
) -> list[Flowable]:
    return [
        section_heading("Territories", st),
        territory_table(analysis, width, st, one_wmsi_column=one_wmsi_column),
        paragraph(f"Territory map: {analysis.territory_map.title}.", st["small"]),
    ]


def _maps_beside_territories(
    analysis: Analysis, specs: Sequence[MapSpec], width: float, fonts: Fonts, st: Styles
) -> Table:
    """Up to two maps with their legends on the left half, the territory table on the right."""
    half = width / 2
    left = _maps(
        analysis, specs, half, fonts, st, per_row=len(specs), cell=width / MAPS_PER_ROW, keep=False
    )
    right = _territories(analysis, half - 8, st, one_wmsi_column=True)
    table = Table([[left, right]], colWidths=[half, half], hAlign="LEFT")
    table.setStyle(
        TableStyle(
            [
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LEFTPADDING", (0, 0), (-1, -1), 0),
                ("RIGHTPADDING", (0, 0), (-1, -1), 0),
                ("LEFTPADDING", (1, 0), (1, 0), 8),
                ("TOPPADDING", (0, 0), (-1, -1), 0),
            ]
        )
    )
    return table


def _maps(
    analysis: Analysis,
    specs: Sequence[MapSpec],
    width: float,
    fonts: Fonts,
    st: Styles,
    *,
    per_row: int = MAPS_PER_ROW,
    cell: float | None = None,
    keep: bool = True,
) -> list[Flowable]:
    """Rows of up to four maps, each row followed by the legends of the kinds it introduces."""
    cell = cell or width / per_row
    radius = min(MERGED_RADIUS if not keep else 44.0, cell / 2 - 14)
    out: list[Flowable] = []
    explained: set[MapKind] = set()
    for start in range(0, len(specs), per_row):
        row = specs[start : start + per_row]
        block: list[Flowable] = [_map_row(analysis, row, cell, radius, fonts)]
        for kind in dict.fromkeys(s.kind for s in row):
            if kind not in explained:
                explained.add(kind)
                merged = any(len(s.merged) > 1 for s in row if s.kind is kind)
                block.append(_legend_strip(analysis, kind, width, fonts, only_normal=merged))
        block.append(Spacer(1, 5))
        out += [KeepTogether(block)] if keep else block
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


def _legend_strip(
    analysis: Analysis, kind: MapKind, width: float, fonts: Fonts, *, only_normal: bool = False
) -> DrawingFlowable:
    """The legend of ``kind``; of a merged all-normal map only the one entry it shows."""
    items = legend_items(analysis, kind)
    if kind is not MapKind.SEGMENTS:
        items = [i for i in items if not i.line]
    if only_normal:
        items = [i for i in items if i.mark == "1"]
    return DrawingFlowable(
        draw_legend(items, width, fonts, size=6.8, label=LEGEND_LABELS[kind] + ":")
    )


def _sign_off(analysis: Analysis, width: float, st: Styles) -> list[Flowable]:
    """The report status, the reader/signature/date line and the generator (for one KeepTogether:
    a KeepTogether nested in another claims a whole page and pushes the block on)."""
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
                ("TOPPADDING", (0, 0), (-1, -1), 8),
                ("LEFTPADDING", (0, 0), (-1, -1), 0),
            ]
        )
    )
    return [
        table,
        Spacer(1, 3),
        paragraph(f"Report status: {status} Computed by {analysis.generator}.", st["label"]),
    ]
