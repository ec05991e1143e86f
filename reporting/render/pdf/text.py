"""Plain text in the PDF: a light flowable for left-aligned text with no markup.

Almost every paragraph of the report (table cells, narrative, cautions) is plain text in one font.
reportlab's Paragraph parses XML markup and handles fragments of mixed style for every one of them,
which made up about a fifth of the PDF's time. :class:`PlainText` does only what plain text needs:
greedy line breaking at spaces with the font's real widths, filling lines exactly as reportlab's
public ``simpleSplit`` does (the tests hold it to simpleSplit; each word is measured once, and a
no-break space does not break), words wider than the column broken between characters, explicit
line breaks kept, splitting across frames and pages between lines under the style's orphan and
widow rules.
Lines sit where Paragraph puts them (first baseline one font size below the top, then one leading
apart), so the page looks the same. Text is made printable first (control characters dropped,
glyphs the font lacks replaced); as nothing is parsed, no escaping is needed.
"""

from __future__ import annotations

import copy
import functools
import re

from reportlab.lib.enums import TA_LEFT
from reportlab.lib.styles import ParagraphStyle
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.platypus import Flowable

from reporting.render import safe_text

__all__ = ["PlainText", "wrap_lines"]


_BREAKABLE = re.compile(r"[ \t\r\f\v]+")
_SLACK = 1e-6
"""Points a whole line must be short of the width to skip the word-by-word filling: widths summed
word by word (as the filling does) and for the whole line differ only in floating-point rounding."""
# style features PlainText does not draw, with the value that means "not used"
_UNSUPPORTED = {
    "leftIndent": 0,
    "rightIndent": 0,
    "firstLineIndent": 0,
    "backColor": None,
    "borderWidth": 0,
    "wordWrap": None,
}


@functools.lru_cache(maxsize=8192)
def _word_width(word: str, font: str, size: float) -> float:
    """``stringWidth`` of one word, remembered: report texts reuse a small vocabulary."""
    return float(stringWidth(word, font, size))


def _break_word(word: str, font: str, size: float, width: float) -> list[str]:
    """``word`` cut into pieces no wider than ``width`` (at least one character each)."""
    pieces: list[str] = []
    start = 0
    while start < len(word):
        end = start + 1
        while end < len(word) and stringWidth(word[start : end + 1], font, size) <= width:
            end += 1
        pieces.append(word[start:end])
        start = end
    return pieces


def _pieces(words: list[str], font: str, size: float, width: float) -> list[tuple[str, float]]:
    """``words`` with their widths, every word wider than ``width`` broken between characters."""
    out: list[tuple[str, float]] = []
    for word in words:
        w = _word_width(word, font, size)
        if w <= width:
            out.append((word, w))
        else:
            out += [(p, _word_width(p, font, size)) for p in _break_word(word, font, size, width)]
    return out


def _greedy(pieces: list[tuple[str, float]], font: str, size: float, width: float) -> list[str]:
    """Greedy filling of measured ``pieces`` (none wider than ``width``), line by line.

    The same sums in the same order as reportlab's public ``simpleSplit`` (``(used + space) + w``,
    restarting from the first word's width), so the same lines even where a line's width equals
    the column's to the last bit (the tests hold it to simpleSplit). Each word is measured once, and
    only ordinary spaces break, where simpleSplit breaks at every Unicode space and would split
    ``100 %``.
    """
    space = _word_width(" ", font, size)
    lines: list[str] = []
    current: list[str] = []
    used = -space
    for word, w in pieces:
        if current and used + space + w > width:
            lines.append(" ".join(current))
            current, used = [word], w
            continue
        current.append(word)
        used = used + space + w
    return [*lines, " ".join(current)]


def wrap_lines(text: str, font: str, size: float, width: float) -> list[str]:
    """``text`` broken into lines no wider than ``width`` points (greedy, at spaces).

    Lines fill as reportlab's :func:`reportlab.lib.utils.simpleSplit` fills them; a word wider than
    the whole line is broken between characters (it then starts a line of its own). Runs of spaces
    count as one; a newline always starts a new line. Only ordinary spaces and tabs separate
    words: a no-break space (U+00A0, U+202F, U+2007) keeps ``100 %`` together.
    """
    lines: list[str] = []
    for chunk in text.split("\n"):
        words = [w for w in _BREAKABLE.split(chunk) if w]
        if not words:
            lines.append("")
            continue
        joined = " ".join(words)
        if stringWidth(joined, font, size) < width - _SLACK:
            lines.append(joined)  # all of it fits: what the filling would make of it
            continue
        lines += _greedy(_pieces(words, font, size, width), font, size, width)
    return lines


class PlainText(Flowable):  # type: ignore[misc]
    """Left-aligned plain text in one paragraph style (font, size, leading, colour, spacing)."""

    def __init__(self, text: str, style: ParagraphStyle, *, cleaned: bool = False) -> None:
        super().__init__()
        if style.alignment != TA_LEFT:
            raise ValueError(f"PlainText sets left-aligned text only, not style {style.name!r}")
        used = [name for name, off in _UNSUPPORTED.items() if getattr(style, name, off) != off]
        if used:
            raise ValueError(f"PlainText cannot draw {', '.join(used)} of style {style.name!r}")
        # like Paragraph: no blank lines before or after, and blank text takes no room
        self.text = (text if cleaned else safe_text.printable(text, style.fontName)).strip()
        self.style = style
        self.space_before = float(style.spaceBefore)
        self.space_after = float(style.spaceAfter)
        self.lines: list[str] = []
        self._wrapped_at: float | None = None

    def __deepcopy__(self, memo: dict[int, object]) -> PlainText:
        """A shallow copy: the text and the (shared) style never change after construction, and
        reportlab's BalancedColumns deep-copies its content at every trial split."""
        return copy.copy(self)

    def _wrap_to(self, width: float) -> list[str]:
        if width != self._wrapped_at:
            st = self.style
            self.lines = wrap_lines(self.text, st.fontName, st.fontSize, width) if self.text else []
            self._wrapped_at = width
        return self.lines

    def minWidth(self) -> float:
        """The widest word: the narrowest column the text fits without breaking words."""
        st = self.style
        words = _BREAKABLE.split(self.text.replace("\n", " "))
        return max((stringWidth(w, st.fontName, st.fontSize) for w in words), default=0.0)

    def wrap(self, available_width: float, available_height: float) -> tuple[float, float]:
        self.width = available_width
        self.height = len(self._wrap_to(available_width)) * self.style.leading
        return self.width, self.height

    def split(self, available_width: float, available_height: float) -> list[Flowable]:
        lines = self._wrap_to(available_width)
        fits = min(int(available_height // self.style.leading), len(lines))
        if fits == len(lines):
            return [self]
        # the style's orphan and widow rules, as Paragraph applies them: by default a first line
        # never stays alone at the foot of a page, a last line may start the next one
        if not self.style.allowWidows and len(lines) - fits == 1:
            fits -= 1
        if fits < 1 or (fits == 1 and not self.style.allowOrphans):
            return []
        head = PlainText("\n".join(lines[:fits]), self.style, cleaned=True)
        tail = PlainText("\n".join(lines[fits:]), self.style, cleaned=True)
        # the space around the paragraph stays outside it, not at the break
        head.space_after = tail.space_before = 0.0
        return [head, tail]

    def getSpaceBefore(self) -> float:
        return self.space_before

    def getSpaceAfter(self) -> float:
        return self.space_after

    def draw(self) -> None:
        st = self.style
        text = self.canv.beginText(0, self.height - st.fontSize)
        text.setFont(st.fontName, st.fontSize, st.leading)
        # setFont writes the leading only with the first glyphs; a leading blank line needs it now
        text.setLeading(st.leading)
        text.setFillColor(st.textColor)
        for line in self.lines:
            text.textLine(line)
        self.canv.drawText(text)
