"""Fonts of the PDF: the Unicode body font shipped with the package, and the map font.

The body text of every PDF is set in DejaVu Sans, shipped in ``reporting/data/fonts/`` with its
licence (see ``data/SOURCES.md``), so a report looks the same and has the same glyphs on every
machine, whatever fonts the system has: Latin, Greek (the β of the curve panels), Cyrillic,
Armenian, Georgian, Hebrew, Arabic letters and many symbols. Nothing is looked up in system font
folders, so no machine can silently swap in a font that lacks a glyph. Should the packaged files
be missing or damaged, the PDF falls back to the built-in Helvetica (WinAnsi only) with a warning,
and text it cannot show is replaced visibly (see :mod:`reporting.render.safe_text`).

Maps and their legends use Helvetica (:data:`MAP_FONTS`), which every PDF viewer has and which the
SVG output names too; strings drawn there keep to WinAnsi characters.
"""

from __future__ import annotations

import io
import logging
from dataclasses import dataclass
from functools import cache
from importlib import resources

from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Fonts:
    """Font names registered with reportlab for one family."""

    regular: str
    bold: str
    italic: str
    embedded: bool


BODY_FAMILY = "DejaVuSans"
FONT_PACKAGE = "reporting.data"
FONT_FOLDER = "fonts"
# Regular, bold and italic (oblique) files of the body family, in that order.
BODY_FILES = ("DejaVuSans.ttf", "DejaVuSans-Bold.ttf", "DejaVuSans-Oblique.ttf")

MAP_FONTS = Fonts("Helvetica", "Helvetica-Bold", "Helvetica-Oblique", embedded=False)
BUILT_IN_FONTS = MAP_FONTS


def font_bytes(filename: str) -> bytes:
    """The bytes of a packaged font file (``importlib.resources``, so zipped installs work)."""
    return resources.files(FONT_PACKAGE).joinpath(FONT_FOLDER, filename).read_bytes()


@cache
def body_fonts() -> Fonts:
    """The packaged Unicode font family for the PDF body, registered once per process."""
    from reportlab.lib.fonts import addMapping

    names = (BODY_FAMILY, f"{BODY_FAMILY}-Bold", f"{BODY_FAMILY}-Italic")
    try:
        for name, filename in zip(names, BODY_FILES, strict=True):
            # A file object: reportlab reads the font from it, wherever the package lives.
            pdfmetrics.registerFont(TTFont(name, io.BytesIO(font_bytes(filename))))
    except Exception as exc:  # missing or damaged package data: fall back visibly
        log.warning("cannot use the packaged font %s (%s); using Helvetica", BODY_FAMILY, exc)
        return BUILT_IN_FONTS
    addMapping(BODY_FAMILY, 0, 0, names[0])
    addMapping(BODY_FAMILY, 1, 0, names[1])
    addMapping(BODY_FAMILY, 0, 1, names[2])
    addMapping(BODY_FAMILY, 1, 1, names[1])
    return Fonts(*names, embedded=True)


@cache
def glyphs(font_name: str) -> frozenset[int] | None:
    """Code points a registered TrueType font maps to a glyph; ``None`` for a built-in font."""
    font = pdfmetrics.getFont(font_name)
    face = getattr(font, "face", None)
    mapping = getattr(face, "charToGlyph", None)
    return frozenset(mapping) if mapping else None
