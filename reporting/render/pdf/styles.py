"""Paragraph styles of the referring-doctor PDF and the helpers that turn text into paragraphs.

Plain left-aligned text becomes a light :class:`~reporting.render.pdf.text.PlainText` (no markup is
parsed); anything else goes through :func:`reporting.render.style.markup_text` (XML-escaped, unknown
glyphs replaced) before it becomes Paragraph markup.
"""

from __future__ import annotations

from typing import Any

from reportlab.lib.enums import TA_LEFT, TA_RIGHT
from reportlab.lib.styles import ParagraphStyle
from reportlab.platypus import Flowable, Paragraph

from reporting.render import palette, safe_text
from reporting.render.fonts import Fonts
from reporting.render.pdf.text import PlainText

Styles = dict[str, ParagraphStyle]


def paragraph_styles(fonts: Fonts) -> Styles:
    """The named paragraph styles of the report, in the embedded body font."""
    base = ParagraphStyle(
        "body", fontName=fonts.regular, fontSize=8.5, leading=11, textColor=palette.INK
    )
    return {
        "body": base,
        "small": ParagraphStyle("small", parent=base, fontSize=7.2, leading=9),
        "cell": ParagraphStyle("cell", parent=base, fontSize=7.6, leading=9.4),
        "cell_bold": ParagraphStyle(
            "cell_bold", parent=base, fontName=fonts.bold, fontSize=7.6, leading=9.4
        ),
        "label": ParagraphStyle(
            "label", parent=base, fontSize=7, leading=9, textColor=palette.MUTED
        ),
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


def paragraph(text: str, st: ParagraphStyle) -> Flowable:
    """Plain (user or computed) text as a paragraph: light :class:`PlainText` when left-aligned,
    else an escaped reportlab Paragraph."""
    if st.alignment == TA_LEFT:
        return PlainText(text, st)
    return Paragraph(safe_text.markup_text(text, st.fontName), st)


def section_heading(text: str, st: Styles) -> Flowable:
    return paragraph(text, st["h2"])


def labelled(label: str, text: str, st: Styles) -> Paragraph:
    """``Indication: …`` with the label in grey; the text escaped."""
    markup = f'<font color="#5f5f5f">{label}:</font> ' + safe_text.markup_text(
        text, st["body"].fontName
    )
    return Paragraph(markup, st["body"])


def sentence(text: str) -> str:
    """``text`` with a capital first letter and a full stop."""
    return text[:1].upper() + text[1:] + "."


def dash(value: Any) -> str:
    """``value`` as text, or an en dash when there is none."""
    return "–" if value is None or value == "" else str(value)
