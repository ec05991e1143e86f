"""The quality PDF as a document: built with the longest lists that still fit on two pages, in
reportlab's invariant mode (the same input gives the same bytes), and written atomically.

Reader and lab names in a script the body font lacks print as replacement marks; each such field is
named in a logged warning before the document is built.
"""

from __future__ import annotations

import io
import logging
from pathlib import Path

from reportlab.platypus import PageBreak

from reporting.files import write_atomic
from reporting.qa.agreement import Agreement
from reporting.qa.pdf.page import LIMITS, MAX_PAGES, Limits, footer, quality_document
from reporting.qa.pdf.page_one import page_one
from reporting.qa.pdf.page_two import page_two
from reporting.qa.review import QualityReview
from reporting.render import safe_text
from reporting.render.fonts import body_fonts
from reporting.render.paragraph_styles import paragraph_styles

log = logging.getLogger(__name__)


def review_pdf_bytes(review: QualityReview, agreement: Agreement | None = None) -> bytes:
    """The quality PDF as bytes (the same input gives the same bytes)."""
    safe_text.warn_lost_characters(
        free_text_fields(review, agreement), body_fonts().regular, "quality review PDF"
    )
    data = b""
    for limits in LIMITS:
        data, pages = _build(review, agreement, limits)
        if pages <= MAX_PAGES:
            break
        log.debug("quality PDF took %d pages; showing less of the long lists", pages)
    return data


def write_review_pdf(
    review: QualityReview, path: Path | str, agreement: Agreement | None = None
) -> None:
    """Write the quality PDF to ``path`` atomically."""
    write_atomic(Path(path), review_pdf_bytes(review, agreement))
    log.info("wrote quality review PDF %s", path)


def free_text_fields(
    review: QualityReview, agreement: Agreement | None = None
) -> list[tuple[str, str | None]]:
    """The free text the quality PDF prints (lab and reader names), by field."""
    readers = [g.group for g in review.by_reader if g.group is not None]
    readers += [d.reader for d in review.discordant if d.reader]
    readers += [r.reader for r in review.non_diagnostic_by_reader if r.reader]
    fields: list[tuple[str, str | None]] = [
        ("study.lab", "; ".join(review.labs)),
        ("study.reader", "; ".join(dict.fromkeys(readers))),
    ]
    if agreement is not None:
        fields += [
            ("study.reader (reader set A)", "; ".join(agreement.readers_a)),
            ("study.reader (reader set B)", "; ".join(agreement.readers_b)),
        ]
    return fields


def _build(review: QualityReview, agreement: Agreement | None, limits: Limits) -> tuple[bytes, int]:
    fonts = body_fonts()
    styles = paragraph_styles(fonts)
    buffer = io.BytesIO()
    doc = quality_document(
        buffer,
        title="Stress echo quality review",
        subject="Stress echocardiography against angiography; reader agreement",
        creator=review.generator,
    )
    on_page = footer(review, fonts)
    story = [
        *page_one(review, styles, fonts, limits),
        PageBreak(),
        *page_two(review, agreement, styles, limits),
    ]
    doc.build(story, onFirstPage=on_page, onLaterPages=on_page)
    return buffer.getvalue(), doc.page
