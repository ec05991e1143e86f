"""Page furniture of the referring-doctor PDF: paper sizes and margins, the footer line (study id,
patient, report status) and "Page n of N", drawn once the page count is known.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from reportlab.lib.pagesizes import A4, LETTER
from reportlab.lib.units import mm
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import BaseDocTemplate

from reporting.render import palette, safe_text
from reporting.render.fonts import Fonts, body_fonts
from reporting.results import Analysis

PAPERS = {"A4": A4, "LETTER": LETTER}
MARGIN = 15 * mm
TOP_MARGIN = 12 * mm


def footer(
    analysis: Analysis, fonts: Fonts, status: str | None = None
) -> Callable[[Canvas, BaseDocTemplate], None]:
    """The ``onPage`` callback drawing the footer rule and the study, patient and status line
    (``status``: a signed version's own status, e.g. amended, instead of the study's)."""

    def on_page(canvas: Canvas, doc: BaseDocTemplate) -> None:
        canvas.saveState()
        y = MARGIN - 1 * mm
        canvas.setStrokeColor(palette.RULE)
        canvas.setLineWidth(0.4)
        canvas.line(doc.leftMargin, y + 9, doc.leftMargin + doc.width, y + 9)
        canvas.setFont(fonts.regular, 7)
        canvas.setFillColor(palette.MUTED)
        name = analysis.patient.name or analysis.patient.id or ""
        left = " · ".join(
            x for x in (analysis.study.id, name, status or analysis.study.report_status.value) if x
        )
        canvas.drawString(doc.leftMargin, y, fit_line(left, fonts.regular, 7, doc.width * 0.75))
        canvas.restoreState()

    return on_page


def fit_line(text: str, font: str, size: float, width: float) -> str:
    """``text`` on one line, cut with an ellipsis to ``width`` points."""
    text = " ".join(safe_text.printable(text, font).split())
    if stringWidth(text, font, size) <= width:
        return text
    while text and stringWidth(text + "…", font, size) > width:
        text = text[:-1]
    return text + "…"


class NumberedCanvas(Canvas):  # type: ignore[misc]
    """Draws "Page n of N" once the page count is known."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._pages: list[dict[str, Any]] = []

    def showPage(self) -> None:
        self._pages.append(dict(self.__dict__))
        self._startPage()

    def save(self) -> None:
        total = len(self._pages)
        for state in self._pages:
            self.__dict__.update(state)
            self.saveState()
            self.setFont(body_fonts().regular, 7)
            self.setFillColor(palette.MUTED)
            width = self._pagesize[0]
            self.drawRightString(
                width - MARGIN, MARGIN - 1 * mm, f"Page {self._pageNumber} of {total}"
            )
            self.restoreState()
            super().showPage()
        super().save()
