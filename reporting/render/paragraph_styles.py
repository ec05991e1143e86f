"""The house paragraph styles, one set for every PDF we make: the referring-doctor report and the
quality-review and reader-agreement PDFs.

One body font (the embedded Unicode family of :mod:`reporting.render.fonts`), one size scale and the
house colours of :mod:`reporting.render.palette`, so the lab's documents look alike. Every style is
left-aligned except ``doc_title`` (the report's right-hand title).
"""

from __future__ import annotations

from reportlab.lib.enums import TA_LEFT, TA_RIGHT
from reportlab.lib.styles import ParagraphStyle

from reporting.render import palette
from reporting.render.fonts import Fonts

Styles = dict[str, ParagraphStyle]


def paragraph_styles(fonts: Fonts) -> Styles:
    """The named paragraph styles, in ``fonts``."""
    base = ParagraphStyle(
        "body",
        fontName=fonts.regular,
        fontSize=8.5,
        leading=11,
        textColor=palette.INK,
        alignment=TA_LEFT,
    )
    return {
        "body": base,
        "para": ParagraphStyle("para", parent=base, spaceAfter=1.5),
        "small": ParagraphStyle("small", parent=base, fontSize=7.2, leading=9),
        "fine": ParagraphStyle(
            "fine", parent=base, fontSize=6.6, leading=8, textColor=palette.MUTED
        ),
        "muted": ParagraphStyle("muted", parent=base, textColor=palette.MUTED),
        "cell": ParagraphStyle("cell", parent=base, fontSize=7.6, leading=9.4),
        "cell_bold": ParagraphStyle(
            "cell_bold", parent=base, fontName=fonts.bold, fontSize=7.6, leading=9.4
        ),
        "label": ParagraphStyle(
            "label", parent=base, fontSize=7, leading=9, textColor=palette.MUTED
        ),
        "title": ParagraphStyle("title", parent=base, fontName=fonts.bold, fontSize=15, leading=19),
        "lab": ParagraphStyle("lab", parent=base, fontName=fonts.bold, fontSize=13, leading=16),
        "doc_title": ParagraphStyle(
            "doc_title",
            parent=base,
            fontName=fonts.bold,
            fontSize=11,
            leading=14,
            alignment=TA_RIGHT,
        ),
        "h2": ParagraphStyle(
            "h2",
            parent=base,
            fontName=fonts.bold,
            fontSize=9.5,
            leading=12,
            spaceBefore=5,
            spaceAfter=1.5,
            keepWithNext=1,  # a heading never ends a column or a page
        ),
        "summary": ParagraphStyle(
            "summary", parent=base, fontName=fonts.bold, fontSize=10, leading=13
        ),
    }
