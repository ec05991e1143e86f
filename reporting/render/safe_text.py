"""Text safety for the PDFs: user free text made printable in the body font.

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

from reporting.render.fonts import glyphs

log = logging.getLogger(__name__)

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
