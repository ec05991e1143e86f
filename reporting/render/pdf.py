"""The referring-doctor PDF: header, answer, bull's-eye maps, tables, narrative, curves, sign-off.

Built with reportlab's platypus in invariant mode, so the same Analysis gives the same bytes. Every
piece of user free text goes through :func:`reporting.render.style.markup_text` (XML-escaped, unknown
glyphs replaced) before it becomes Paragraph markup, and into table cells as wrapping Paragraphs, so
hostile or very long text can make the report longer but never breaks it. With time-intensity
curves, a grid of the fitted replenishment curves (:mod:`reporting.render.curves`) follows the
narrative, on a page of its own unless it fits where the narrative ends.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from reportlab.graphics.shapes import Drawing
from reportlab.lib.enums import TA_RIGHT
from reportlab.lib.pagesizes import A4, LETTER
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import (
    BaseDocTemplate,
    CondPageBreak,
    Flowable,
    Frame,
    KeepTogether,
    PageTemplate,
    Paragraph,
    Spacer,
    Table,
    TableStyle,
)

from reporting.errors import InputError
from reporting.model import ReportStatus, Stage
from reporting.render import curves, diagram, narrative, style
from reporting.render.diagram import MapSpec
from reporting.render.legend import draw_legend, legend_items
from reporting.render.scheme import MapKind
from reporting.render.style import Fonts
from reporting.render.tables import exercise_table, haemodynamics_table, territory_table
from reporting.results import Analysis, DiagnosticStatus

PAPERS = {"A4": A4, "LETTER": LETTER}
MARGIN = 15 * mm
MAPS_PER_ROW = 4
STATUS_COLOURS = {
    DiagnosticStatus.ISCHEMIA: style.OKABE_ITO["vermillion"],
    DiagnosticStatus.NO_ISCHEMIA: style.OKABE_ITO["bluish_green"],
    DiagnosticStatus.NON_DIAGNOSTIC: style.OKABE_ITO["orange"],
}


def report_title(analysis: Analysis) -> str:
    return f"Stress echocardiography report {analysis.study.id}"


def pdf_bytes(
    analysis: Analysis, *, paper: str = "A4", templates_dir: Path | str | None = None
) -> bytes:
    """The referring-doctor report of ``analysis`` as PDF bytes (A4 or Letter)."""
    size = PAPERS.get(paper.upper())
    if size is None:
        raise InputError("paper", f"unknown paper size {paper!r}; use A4 or Letter")
    fonts = style.body_fonts()
    styles = _styles(fonts)
    buffer = io.BytesIO()
    doc = BaseDocTemplate(
        buffer,
        pagesize=size,
        leftMargin=MARGIN,
        rightMargin=MARGIN,
        topMargin=MARGIN,
        bottomMargin=MARGIN + 4 * mm,
        title=report_title(analysis),
        subject=narrative.summary(analysis),
        author=style.printable(analysis.study.lab or "segreport", fonts.regular),
        creator=analysis.generator,
        keywords=f"stress echocardiography; {int(analysis.segment_model)}-segment model",
        invariant=1,
    )
    frame = Frame(
        doc.leftMargin,
        doc.bottomMargin,
        doc.width,
        doc.height,
        id="body",
        leftPadding=0,
        rightPadding=0,
        topPadding=0,
        bottomPadding=0,
    )
    doc.addPageTemplates(
        [PageTemplate(id="page", frames=[frame], onPage=_decorate(analysis, fonts))]
    )
    story = _story(analysis, doc.width, styles, fonts, templates_dir)
    doc.build(story, canvasmaker=_NumberedCanvas)
    return buffer.getvalue()


# --- styles -----------------------------------------------------------------------------------


def _styles(fonts: Fonts) -> dict[str, ParagraphStyle]:
    base = ParagraphStyle(
        "body", fontName=fonts.regular, fontSize=8.5, leading=11, textColor=style.INK
    )
    return {
        "body": base,
        "small": ParagraphStyle("small", parent=base, fontSize=7.2, leading=9),
        "cell": ParagraphStyle("cell", parent=base, fontSize=7.6, leading=9.4),
        "cell_bold": ParagraphStyle(
            "cell_bold", parent=base, fontName=fonts.bold, fontSize=7.6, leading=9.4
        ),
        "label": ParagraphStyle("label", parent=base, fontSize=7, leading=9, textColor=style.MUTED),
        "lab": ParagraphStyle("lab", parent=base, fontName=fonts.bold, fontSize=13, leading=16),
        "title": ParagraphStyle(
            "title", parent=base, fontName=fonts.bold, fontSize=11, leading=14, alignment=TA_RIGHT
        ),
        "h2": ParagraphStyle(
            "h2",
            parent=base,
            fontName=fonts.bold,
            fontSize=9.5,
            leading=12,
            spaceBefore=7,
            spaceAfter=2,
        ),
        "summary": ParagraphStyle(
            "summary", parent=base, fontName=fonts.bold, fontSize=10, leading=13
        ),
        "para": ParagraphStyle("para", parent=base, spaceAfter=2.5),
    }


def _p(text: str, st: ParagraphStyle) -> Paragraph:
    """A Paragraph of plain (user or computed) text, escaped."""
    return Paragraph(style.markup_text(text, st.fontName), st)


# --- story ------------------------------------------------------------------------------------


def _story(
    analysis: Analysis,
    width: float,
    st: dict[str, ParagraphStyle],
    fonts: Fonts,
    templates_dir: Path | str | None,
) -> list[Flowable]:
    story: list[Flowable] = []
    story += _header(analysis, width, st)
    story.append(Spacer(1, 5))
    story.append(_answer_box(analysis, width, st))
    story.append(Spacer(1, 6))
    story += _maps(analysis, width, fonts, st)
    story.append(_section_heading("Territories", st))
    story.append(territory_table(analysis, width, st))
    story.append(_p(f"Territory map: {analysis.territory_map.title}.", st["small"]))
    stress_block: list[Flowable] = [
        _section_heading("Haemodynamics and LV function", st),
        haemodynamics_table(analysis, width, st),
    ]
    exercise = exercise_table(analysis, width, st)
    if exercise is not None:
        stress_block += [Spacer(1, 4), exercise]
    story.append(KeepTogether(stress_block))
    text = narrative.narrative_text(analysis, templates_dir, include_cautions=False)
    for heading, paragraphs in narrative.text_blocks(text):
        block: list[Flowable] = [_section_heading(heading, st)]
        block += [_p(p, st["para"]) for p in paragraphs]
        story.append(KeepTogether(block[:2]))
        story += block[2:]
    story += _curves(analysis, width, fonts, st)
    story.append(Spacer(1, 4))
    story.append(
        KeepTogether(
            [
                _section_heading("Cautions", st),
                *[_p("• " + c, st["small"]) for c in analysis.cautions],
            ]
        )
    )
    story.append(Spacer(1, 8))
    story.append(_sign_off(analysis, width, st))
    return story


def _curves(
    analysis: Analysis, width: float, fonts: Fonts, st: dict[str, ParagraphStyle]
) -> list[Flowable]:
    """The fitted-curve grid under its heading; nothing without kinetics."""
    drawings = curves.curve_grid(analysis, width, fonts)
    if not drawings:
        return []
    heading = _section_heading("Fitted replenishment curves", st)
    intro = _p(curves.caption(analysis, fonts), st["small"])
    # the whole grid moves to a new page unless it fits below the narrative
    needed = curves.grid_height(drawings) + 3 * st["h2"].leading + 3 * st["small"].leading
    first = KeepTogether([heading, intro, Spacer(1, 3), drawings[0], drawings[1]])
    return [CondPageBreak(needed), first, *drawings[2:]]


def _section_heading(text: str, st: dict[str, ParagraphStyle]) -> Paragraph:
    return _p(text, st["h2"])


def _sentence(text: str) -> str:
    return text[:1].upper() + text[1:] + "."


def _dash(value: Any) -> str:
    return "–" if value is None or value == "" else str(value)


def _header(analysis: Analysis, width: float, st: dict[str, ParagraphStyle]) -> list[Flowable]:
    study, patient = analysis.study, analysis.patient
    lab_cell: list[Flowable] = [_p(study.lab or "Echocardiography laboratory", st["lab"])]
    if study.lab_address:
        lab_cell.append(_p(study.lab_address, st["small"]))
    status = study.report_status
    status_style = ParagraphStyle(
        "status", parent=st["title"], fontSize=8, leading=10, textColor=style.MUTED
    )
    title_cell = [
        _p("Stress echocardiography report", st["title"]),
        _p(f"Report status: {status.value.upper()}", status_style),
    ]
    top = Table([[lab_cell, title_cell]], colWidths=[width * 0.6, width * 0.4])
    top.setStyle(
        TableStyle(
            [
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LEFTPADDING", (0, 0), (-1, -1), 0),
                ("RIGHTPADDING", (0, 0), (-1, -1), 0),
                ("LINEBELOW", (0, 0), (-1, 0), 1.2, style.INK),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 5),
            ]
        )
    )
    age = f"{patient.age_years} y" if patient.age_years is not None else patient.age_group
    age_sex = " ".join(x for x in (age, patient.sex.value if patient.sex else None) if x)
    pairs = [
        ("Patient", patient.name),
        ("Patient ID", patient.id),
        ("Study ID", study.id),
        ("Age, sex", age_sex or None),
        ("Date of birth", patient.birth_date.isoformat() if patient.birth_date else None),
        ("Study date", study.date.isoformat() if study.date else str(study.year)),
        ("Referring", study.referring_physician),
        ("Reader", study.reader),
        ("Sonographer", study.sonographer),
    ]
    rows = []
    for i in range(0, len(pairs), 3):
        row: list[Flowable] = []
        for label, value in pairs[i : i + 3]:
            row += [_p(label, st["label"]), _p(_dash(value), st["cell"])]
        rows.append(row)
    label_w, value_w = width * 0.105, width * (1 / 3 - 0.105)
    grid = Table(rows, colWidths=[label_w, value_w] * 3)
    grid.setStyle(
        TableStyle(
            [
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LEFTPADDING", (0, 0), (-1, -1), 0),
                ("RIGHTPADDING", (0, 0), (-1, -1), 4),
                ("TOPPADDING", (0, 0), (-1, -1), 1.5),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 1.5),
            ]
        )
    )
    protocol = narrative.stress_paragraphs(analysis)[0]
    lines = [
        top,
        Spacer(1, 4),
        grid,
        Spacer(1, 3),
        _labelled("Indication", analysis.study.indication or "not given", st),
        _labelled("Protocol", protocol, st),
    ]
    if study.deidentified:
        lines.append(
            _labelled("Record", "de-identified (names, record numbers and exact dates removed)", st)
        )
    if analysis.contrast_used:
        lines.append(
            _labelled("Enhancing agent", analysis.contrast_agent or "used (agent not named)", st)
        )
    return lines


def _labelled(label: str, text: str, st: dict[str, ParagraphStyle]) -> Paragraph:
    markup = f'<font color="#5f5f5f">{label}:</font> ' + style.markup_text(
        text, st["body"].fontName
    )
    return Paragraph(markup, st["body"])


def _answer_box(analysis: Analysis, width: float, st: dict[str, ParagraphStyle]) -> Table:
    c = analysis.conclusion
    facts = []
    if Stage.PEAK in analysis.wmsi:
        facts.append(f"peak WMSI {analysis.wmsi[Stage.PEAK]:.2f}")
    s = analysis.stress
    if s.peak_hr_bpm is not None:
        pct = (
            f", {s.peak_hr_percent_of_predicted:.0f} % of predicted"
            if s.peak_hr_percent_of_predicted is not None
            else ""
        )
        facts.append(f"peak heart rate {s.peak_hr_bpm} bpm{pct}")
    facts.append("adequate stress" if s.adequate else "stress not adequate")
    count = len(c.high_risk_findings)
    facts.append(
        f"{count} high-risk finding{'s' if count != 1 else ''}" if count else "no high-risk finding"
    )
    box = Table(
        [
            [
                [
                    _p(narrative.summary(analysis), st["summary"]),
                    _p(_sentence("; ".join(facts)), st["body"]),
                ]
            ]
        ],
        colWidths=[width],
    )
    box.setStyle(
        TableStyle(
            [
                ("BACKGROUND", (0, 0), (-1, -1), style.PANEL),
                ("LINEBEFORE", (0, 0), (0, -1), 4, style.hex_color(STATUS_COLOURS[c.status])),
                ("LEFTPADDING", (0, 0), (-1, -1), 9),
                ("TOPPADDING", (0, 0), (-1, -1), 5),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 6),
            ]
        )
    )
    return box


def _maps(
    analysis: Analysis, width: float, fonts: Fonts, st: dict[str, ParagraphStyle]
) -> list[Flowable]:
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
        diagram.bullseye(analysis, s, radius=radius, legend=False, fonts=fonts, width=cell)
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


def _legend_strip(analysis: Analysis, kind: MapKind, width: float, fonts: Fonts) -> Drawing:
    items = legend_items(analysis, kind)
    if kind is not MapKind.SEGMENTS:
        items = [i for i in items if not i.line]
    return draw_legend(items, width, fonts, size=6.8, label=LEGEND_LABELS[kind] + ":")


def _sign_off(analysis: Analysis, width: float, st: dict[str, ParagraphStyle]) -> Flowable:
    study = analysis.study
    if study.report_status is ReportStatus.FINAL:
        status = "Final report, signed by the reading physician."
    else:
        status = "Preliminary report: not yet signed; computed values await physician review."
    rows = [
        [
            _p("Reader", st["label"]),
            _p(_dash(study.reader), st["cell"]),
            _p("Signature", st["label"]),
            _p("", st["cell"]),
            _p("Date", st["label"]),
            _p("", st["cell"]),
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
                ("LINEBELOW", (1, 0), (1, 0), 0.6, style.INK),
                ("LINEBELOW", (3, 0), (3, 0), 0.6, style.INK),
                ("LINEBELOW", (5, 0), (5, 0), 0.6, style.INK),
                ("VALIGN", (0, 0), (-1, -1), "BOTTOM"),
                ("TOPPADDING", (0, 0), (-1, -1), 14),
                ("LEFTPADDING", (0, 0), (-1, -1), 0),
            ]
        )
    )
    return KeepTogether(
        [
            _p(f"Report status: {status}", st["body"]),
            table,
            Spacer(1, 3),
            _p(f"Computed by {analysis.generator}.", st["label"]),
        ]
    )


# --- page furniture ---------------------------------------------------------------------------


def _decorate(analysis: Analysis, fonts: Fonts) -> Any:
    def on_page(canvas: Canvas, doc: BaseDocTemplate) -> None:
        canvas.saveState()
        y = MARGIN - 1 * mm
        canvas.setStrokeColor(style.RULE)
        canvas.setLineWidth(0.4)
        canvas.line(doc.leftMargin, y + 9, doc.leftMargin + doc.width, y + 9)
        canvas.setFont(fonts.regular, 7)
        canvas.setFillColor(style.MUTED)
        name = analysis.patient.name or analysis.patient.id or ""
        left = " · ".join(
            x for x in (analysis.study.id, name, analysis.study.report_status.value) if x
        )
        canvas.drawString(doc.leftMargin, y, _fit(left, fonts.regular, 7, doc.width * 0.75))
        canvas.restoreState()

    return on_page


def _fit(text: str, font: str, size: float, width: float) -> str:
    text = " ".join(style.printable(text, font).split())
    if stringWidth(text, font, size) <= width:
        return text
    while text and stringWidth(text + "…", font, size) > width:
        text = text[:-1]
    return text + "…"


class _NumberedCanvas(Canvas):  # type: ignore[misc]
    """Draws "Page n of N" once the page count is known."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._pages: list[dict[str, Any]] = []

    def showPage(self) -> None:
        self._pages.append(dict(self.__dict__))
        self._startPage()

    def save(self) -> None:
        total = len(self._pages)
        for state in self._pages:
            self.__dict__.update(state)
            self.saveState()
            self.setFont(style.body_fonts().regular, 7)
            self.setFillColor(style.MUTED)
            width = self._pagesize[0]
            self.drawRightString(
                width - MARGIN, MARGIN - 1 * mm, f"Page {self._pageNumber} of {total}"
            )
            self.restoreState()
            super().showPage()
        super().save()


__all__ = ["PAPERS", "pdf_bytes", "report_title"]
