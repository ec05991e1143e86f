"""The reader-agreement result on its own as a PDF (``segreport agreement --pdf``).

Built from the quality PDF's parts: the same paragraph and table styles, the same agreement table
(wall-motion kappas per stage, ischaemia per patient and per territory, with Landis & Koch bands),
the same footer and list limits. Around them: the studies whose two readings reach different
conclusions, with both readers' status and territories, the studies not compared (read on one side
only, or with different segment models), the cautions and the sources. Long lists are cut with a
pointer to the agreement JSON so the document stays within two pages; the same input gives the
same bytes (reportlab's invariant mode). Reader names are escaped and checked against the font.
"""

from __future__ import annotations

import io
import logging
from pathlib import Path
from typing import Any

from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.platypus import Flowable, Paragraph, Spacer, Table

from reporting.files import write_atomic
from reporting.qa.agreement import Agreement
from reporting.qa.layout import table_style
from reporting.qa.pdf.page import (
    FRAME_WIDTH,
    LIMITS,
    MAX_PAGES,
    READER_CHARS,
    Limits,
    clip,
    footer_line,
    id_list,
    quality_document,
)
from reporting.qa.pdf.page_two import agreement_section
from reporting.render import safe_text
from reporting.render.fonts import body_fonts
from reporting.render.paragraph_styles import paragraph_styles
from reporting.results import DiagnosticStatus
from reporting.segments import Territory

log = logging.getLogger(__name__)

TITLE = "Stress echo reader agreement"

STATUS_TEXT = {
    DiagnosticStatus.ISCHEMIA: "ischaemia",
    DiagnosticStatus.NO_ISCHEMIA: "no ischaemia",
    DiagnosticStatus.NON_DIAGNOSTIC: "non-diagnostic",
}


def agreement_pdf_bytes(agreement: Agreement) -> bytes:
    """The agreement PDF as bytes (the same input gives the same bytes)."""
    safe_text.warn_lost_characters(
        agreement_text_fields(agreement), body_fonts().regular, "reader agreement PDF"
    )
    data = b""
    for limits in LIMITS:
        data, pages = _build(agreement, limits)
        if pages <= MAX_PAGES:
            break
        log.debug("agreement PDF took %d pages; showing less of the long lists", pages)
    return data


def write_agreement_pdf(agreement: Agreement, path: Path | str) -> None:
    """Write the agreement PDF to ``path`` atomically."""
    write_atomic(Path(path), agreement_pdf_bytes(agreement))
    log.info("wrote reader agreement PDF %s", path)


def agreement_text_fields(agreement: Agreement) -> list[tuple[str, str | None]]:
    """The free text the agreement PDF prints (reader names), by field."""
    return [
        ("study.reader (reader set A)", "; ".join(agreement.readers_a)),
        ("study.reader (reader set B)", "; ".join(agreement.readers_b)),
    ]


def _build(agreement: Agreement, limits: Limits) -> tuple[bytes, int]:
    fonts = body_fonts()
    s = paragraph_styles(fonts)
    buffer = io.BytesIO()
    doc = quality_document(
        buffer,
        title=TITLE,
        subject="Agreement of two readers of the same stress echo studies",
        creator=agreement.generator,
    )
    on_page = footer_line(f"{TITLE} · {agreement.matched_studies} studies read by both", fonts)
    story: list[Flowable] = [
        Paragraph(TITLE, s["title"]),
        Spacer(1, 2 * mm),
        *agreement_section(agreement, s, limits),
        Spacer(1, 3 * mm),
        *_disagreements(agreement, s, limits),
        Spacer(1, 3 * mm),
        *_not_compared(agreement, s, limits),
        Spacer(1, 3 * mm),
        Paragraph("Cautions", s["h2"]),
        *[Paragraph(f"• {c}", s["small"]) for c in agreement.cautions],
        Spacer(1, 2 * mm),
        Paragraph("Sources: " + " ".join(agreement.sources), s["small"]),
    ]
    doc.build(story, onFirstPage=on_page, onLaterPages=on_page)
    return buffer.getvalue(), doc.page


def _territories(values: list[Territory]) -> str:
    return ", ".join(t.value for t in values) or "none"


def _disagreements(
    agreement: Agreement, s: dict[str, ParagraphStyle], limits: Limits
) -> list[Flowable]:
    rows_in = agreement.conclusion_disagreements
    story: list[Flowable] = [Paragraph("Studies with different conclusions", s["h2"])]
    if not rows_in:
        story.append(Paragraph("None: both readings reach the same conclusion.", s["body"]))
        return story
    font = s["cell"].fontName
    rows: list[list[Any]] = [
        ["Study", "Reader A", "Reader B", "Conclusion A", "Conclusion B", "Territories A / B"]
    ]
    for d in rows_in[: limits.discordant_rows]:
        rows.append(
            [
                Paragraph(safe_text.markup_text(d.study_id, font), s["cell"]),
                Paragraph(
                    safe_text.markup_text(clip(d.reader_a or "—", READER_CHARS), font), s["cell"]
                ),
                Paragraph(
                    safe_text.markup_text(clip(d.reader_b or "—", READER_CHARS), font), s["cell"]
                ),
                STATUS_TEXT[d.status_a],
                STATUS_TEXT[d.status_b],
                f"{_territories(d.territories_a)} / {_territories(d.territories_b)}",
            ]
        )
    table = Table(
        rows,
        colWidths=[24 * mm, 34 * mm, 34 * mm, 24 * mm, 24 * mm, FRAME_WIDTH - 140 * mm],
        hAlign="LEFT",
        repeatRows=1,
    )
    table.setStyle(table_style(s, header_rows=1))
    story.append(table)
    hidden = len(rows_in) - limits.discordant_rows
    if hidden > 0:
        story.append(Paragraph(f"… and {hidden} more in the agreement JSON.", s["small"]))
    return story


def _not_compared(
    agreement: Agreement, s: dict[str, ParagraphStyle], limits: Limits
) -> list[Flowable]:
    def ids(values: list[str]) -> str:
        return id_list(values, limits, "agreement JSON")

    return [
        Paragraph("Studies not compared", s["h2"]),
        Paragraph(
            f"<b>Read in set A only ({len(agreement.only_in_a)}):</b> {ids(agreement.only_in_a)}",
            s["body"],
        ),
        Paragraph(
            f"<b>Read in set B only ({len(agreement.only_in_b)}):</b> {ids(agreement.only_in_b)}",
            s["body"],
        ),
        Paragraph(
            f"<b>Different segment models, left out of the wall-motion kappas "
            f"({len(agreement.segment_model_differs)}):</b> "
            f"{ids(agreement.segment_model_differs)}",
            s["body"],
        ),
    ]
