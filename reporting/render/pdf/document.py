"""The referring-doctor PDF as a document: page template, metadata, and the check that every
free-text field can be shown in the body font.

Built with reportlab's platypus in invariant mode, so the same Analysis gives the same bytes. User
free text is escaped before it becomes Paragraph markup, and goes into table cells as wrapping
Paragraphs, so hostile or very long text can make the report longer but never breaks it. Characters
the embedded font has no glyph for (a name in a script it lacks) print as replacement marks; each
field that loses characters that way is named in a logged warning.
"""

from __future__ import annotations

import io
import logging
from pathlib import Path

from reportlab.lib.units import mm
from reportlab.platypus import BaseDocTemplate, Frame, PageTemplate

from reporting.errors import InputError
from reporting.render import narrative, safe_text
from reporting.render.fonts import body_fonts
from reporting.render.pdf.header import report_title
from reporting.render.pdf.page import MARGIN, PAPERS, TOP_MARGIN, NumberedCanvas, footer
from reporting.render.pdf.signature import SignatureBlock
from reporting.render.pdf.story import build_story
from reporting.render.pdf.styles import paragraph_styles
from reporting.results import Analysis

log = logging.getLogger(__name__)


def pdf_bytes(
    analysis: Analysis,
    *,
    paper: str = "A4",
    templates_dir: Path | str | None = None,
    signature: SignatureBlock | None = None,
) -> bytes:
    """The referring-doctor report of ``analysis`` as PDF bytes (A4 or Letter).

    ``signature`` (from the report store) replaces the blank sign-off with the electronic
    signature and, for an amendment, names the superseded version on page 1.
    """
    size = PAPERS.get(paper.upper())
    if size is None:
        raise InputError("paper", f"unknown paper size {paper!r}; use A4 or Letter")
    fonts = body_fonts()
    safe_text.warn_lost_characters(
        free_text_fields(analysis), fonts.regular, f"{analysis.study.id} PDF"
    )
    styles = paragraph_styles(fonts)
    buffer = io.BytesIO()
    doc = BaseDocTemplate(
        buffer,
        pagesize=size,
        leftMargin=MARGIN,
        rightMargin=MARGIN,
        topMargin=TOP_MARGIN,
        bottomMargin=MARGIN + 4 * mm,
        title=report_title(analysis),
        subject=narrative.summary(analysis),
        author=safe_text.printable(analysis.study.lab or "segreport", fonts.regular),
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
        [
            PageTemplate(
                id="page",
                frames=[frame],
                onPage=footer(analysis, fonts, signature.status if signature else None),
            )
        ]
    )
    story = build_story(analysis, doc.width, styles, fonts, templates_dir, signature)
    doc.build(story, canvasmaker=NumberedCanvas)
    log.debug("built the PDF of %s", analysis.study.id)
    return buffer.getvalue()


def free_text_fields(analysis: Analysis) -> list[tuple[str, str | None]]:
    """The free-text fields the PDF prints, named by their place in the study file."""
    study, patient = analysis.study, analysis.patient
    fields: list[tuple[str, str | None]] = [
        ("patient.name", patient.name),
        ("patient.id", patient.id),
        ("study.id", study.id),
        ("study.lab", study.lab),
        ("study.lab_address", study.lab_address),
        ("study.reader", study.reader),
        ("study.sonographer", study.sonographer),
        ("study.referring_physician", study.referring_physician),
        ("indication", study.indication),
        ("comments", study.comments),
        ("referral_question", study.referral_question),
        ("impression", study.impression),
        ("recommendations", study.recommendations),
        ("other_findings", study.other_findings),
        ("contrast.agent", analysis.contrast_agent),
        ("territory_map.title", analysis.territory_map.title),
    ]
    fields += [
        (f"stages.{stage.value}.symptoms", h.symptoms)
        for stage, h in analysis.haemodynamics.items()
    ]
    return fields
