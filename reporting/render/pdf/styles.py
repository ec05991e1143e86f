"""The helpers that turn text into paragraphs of the referring-doctor PDF; the styles themselves
are the house set of :mod:`reporting.render.paragraph_styles`, shared with the quality PDFs.

Plain left-aligned text becomes a light :class:`~reporting.render.pdf.text.PlainText` (no markup is
parsed); anything else goes through :func:`reporting.render.safe_text.markup_text` (XML-escaped, unknown
glyphs replaced) before it becomes Paragraph markup.
"""

from __future__ import annotations

from typing import Any

from reportlab.lib.enums import TA_LEFT
from reportlab.lib.styles import ParagraphStyle
from reportlab.platypus import Flowable, Paragraph

from reporting.render import safe_text
from reporting.render.paragraph_styles import Styles, paragraph_styles
from reporting.render.pdf.text import PlainText

__all__ = [
    "Styles",
    "dash",
    "labelled",
    "paragraph",
    "paragraph_styles",
    "section_heading",
    "sentence",
]


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
