"""Colours and text safety shared by the maps and the PDF; fonts live in :mod:`reporting.render.fonts`.

The colours are our own scheme built from two published colour-blind-safe palettes: the sequential
ColorBrewer schemes of Harrower M & Brewer CA, Cartographic Journal 2003;40:27–37 ("YlOrBr" for wall
motion, "Blues" for perfusion) and the qualitative Okabe–Ito palette (Okabe M & Ito K, "Color
Universal Design", 2002/2008) for categories. Every sector also carries a digit, a letter or a hatch,
so a map stays readable when printed in greyscale.

Free text from users passes through :func:`markup_text` before it reaches reportlab paragraph markup:
XML special characters are escaped, control characters dropped, and characters the body font has no
glyph for are replaced by U+FFFD (or ``?``), so hostile text never breaks the layout or the parser.
:func:`warn_lost_characters` logs a warning naming each free-text field that loses characters that
way (a name in a script the font lacks), so a blank or garbled field never goes unnoticed.
"""

from __future__ import annotations

import logging
import re
from collections.abc import Iterable
from xml.sax.saxutils import escape

from reportlab.lib import colors
from reportlab.lib.colors import Color

# Re-exported: the maps, the PDF and the quality PDF import these from here.
from reporting.render.fonts import MAP_FONTS as MAP_FONTS
from reporting.render.fonts import Fonts as Fonts
from reporting.render.fonts import body_fonts as body_fonts
from reporting.render.fonts import glyphs

log = logging.getLogger(__name__)

# --- palettes ---------------------------------------------------------------------------------

# ColorBrewer "YlOrBr", 5 classes (Harrower & Brewer 2003): sequential, colour-blind safe.
YLORBR_5 = ("#ffffd4", "#fed98e", "#fe9929", "#d95f0e", "#993404")
# ColorBrewer "Blues", 3 classes (Harrower & Brewer 2003).
BLUES_3 = ("#eff3ff", "#9ecae1", "#3182bd")
# Okabe–Ito qualitative palette (Okabe & Ito 2008), colour-blind safe.
OKABE_ITO = {
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
    "black": "#000000",
}

INK = colors.HexColor("#1a1a1a")
MUTED = colors.HexColor("#5f5f5f")
RULE = colors.HexColor("#9a9a9a")
PANEL = colors.HexColor("#f2f2f2")
NOT_SEEN_FILL = colors.HexColor("#e6e6e6")
WHITE = colors.white


def hex_color(value: str) -> Color:
    return colors.HexColor(value)


def tint(value: str, amount: float) -> Color:
    """``value`` mixed with white; ``amount`` 0 keeps the colour, 1 gives white."""
    base = colors.HexColor(value)
    return Color(
        base.red + (1 - base.red) * amount,
        base.green + (1 - base.green) * amount,
        base.blue + (1 - base.blue) * amount,
    )


def text_on(fill: Color) -> Color:
    """Black or white, whichever reads better on ``fill`` (relative luminance, WCAG 2.x)."""

    def channel(c: float) -> float:
        return c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4

    luminance = (
        0.2126 * channel(fill.red) + 0.7152 * channel(fill.green) + 0.0722 * channel(fill.blue)
    )
    # Contrast with black (L + 0.05) / 0.05 against white 1.05 / (L + 0.05): black wins above ~0.18.
    return INK if luminance > 0.18 else WHITE


# --- fonts: in reporting.render.fonts; the names stay importable from here ------------------------

_CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\ud800-\udfff\ufeff]")
_WINANSI = frozenset(range(0x20, 0x7F)) | frozenset(range(0xA0, 0x100))
REPLACEMENT = "\ufffd"


def _known(font_name: str) -> frozenset[int]:
    """Code points ``font_name`` can show (a built-in font: WinAnsi and a few typographic marks)."""
    known = glyphs(font_name)
    return known if known is not None else _WINANSI | frozenset(map(ord, "–—‘’“”•…€™"))


def _clean(text: str) -> str:
    return _CONTROL.sub("", text.replace("\r\n", "\n").replace("\t", " "))


def _missing(text: str, known: frozenset[int]) -> set[str]:
    """The distinct characters of ``text`` (already cleaned) that are not in ``known``."""
    return {c for c in set(text) if ord(c) not in known and c != "\n"}


def printable(text: str, font_name: str) -> str:
    """``text`` with control characters removed and unknown glyphs replaced."""
    known = _known(font_name)
    text = _clean(text)
    missing = _missing(text, known)
    if not missing:
        return text
    fallback = REPLACEMENT if ord(REPLACEMENT) in known else "?"
    return "".join(fallback if c in missing else c for c in text)


def lost_characters(text: str, font_name: str) -> int:
    """How many characters of ``text`` ``font_name`` cannot show (they print as U+FFFD or ``?``).

    Control characters are not counted: they are dropped on purpose and show nothing anyway.
    """
    text = _clean(text)
    return sum(text.count(c) for c in _missing(text, _known(font_name)))


def warn_lost_characters(
    fields: Iterable[tuple[str, str | None]], font_name: str, document: str
) -> list[str]:
    """Log a warning for each free-text field of which ``font_name`` cannot show every character.

    ``fields`` are (name, text) pairs, named by their place in the input (``patient.name``). The
    warning names the field and the count, never the text itself, which may identify a patient.
    Returns the names of the fields that lose characters; rendering goes on with replacement marks.
    """
    losing = []
    for name, text in fields:
        lost = lost_characters(text, font_name) if text else 0
        if lost:
            losing.append(name)
            log.warning(
                "%s: %d character%s of %s cannot be shown in the font %s and print as "
                "replacement marks",
                document,
                lost,
                "s" if lost != 1 else "",
                name,
                font_name,
            )
    return losing


def markup_text(text: str, font_name: str) -> str:
    """Free text made safe for reportlab Paragraph markup (escaped, line breaks kept)."""
    return escape(printable(text, font_name)).replace("\n", "<br/>")
