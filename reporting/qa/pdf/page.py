"""Page furniture and shared text of the quality PDF: the A4 page and its margins, how much of each
long list fits (tried in turn until the document fits on two pages), the footer line, the period
covered, and lists of names and study ids cut to length with a pointer to the review JSON.

Ids and names read back from records or the angiography CSV are not guaranteed markup-safe: they
are escaped here before they reach paragraph markup.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any
from xml.sax.saxutils import escape

from reportlab.lib.pagesizes import A4
from reportlab.lib.units import mm

from reporting.qa.review import ExcludedStudy, QualityReview
from reporting.render import palette, safe_text
from reporting.render.fonts import Fonts


@dataclass(frozen=True)
class Limits:
    """How much of each long list the PDF shows; the rest is in the review JSON."""

    discordant_rows: int
    listed_ids: int
    groups_per_kind: int


# Tried in turn until the document fits on two pages.
LIMITS = (Limits(18, 30, 8), Limits(12, 16, 6), Limits(6, 8, 4), Limits(3, 4, 3))
MAX_PAGES = 2
READER_CHARS = 26
MARGIN = 16 * mm
PAGE_WIDTH, PAGE_HEIGHT = A4
FRAME_WIDTH = PAGE_WIDTH - 2 * MARGIN


def footer(review: QualityReview, fonts: Fonts) -> Callable[[Any, Any], None]:
    """The page callback drawing the title, the period and the page number under the frame."""
    return footer_line(f"Stress echo quality review · {period(review)}", fonts)


def footer_line(text: str, fonts: Fonts) -> Callable[[Any, Any], None]:
    """The page callback drawing ``text`` and the page number under the frame."""
    line = safe_text.printable(text, fonts.regular)

    def draw(canvas: Any, document: Any) -> None:
        canvas.saveState()
        canvas.setFont(fonts.regular, 7.5)
        canvas.setFillColor(palette.MUTED)
        canvas.drawString(MARGIN, MARGIN - 2 * mm, line)
        canvas.drawRightString(PAGE_WIDTH - MARGIN, MARGIN - 2 * mm, f"page {document.page}")
        canvas.restoreState()

    return draw


def period(review: QualityReview) -> str:
    """The dates covered, and the dates asked for when a filter was given."""
    p = review.period
    if p.first_study_date is None or p.last_study_date is None:
        covered = "no dated study"
    else:
        covered = f"{p.first_study_date.isoformat()} to {p.last_study_date.isoformat()}"
    if p.date_from is None and p.date_to is None:
        return f"{covered} (all dates)"
    asked_from = p.date_from.isoformat() if p.date_from else "start"
    asked_to = p.date_to.isoformat() if p.date_to else "end"
    return f"{covered} (selected {asked_from} to {asked_to})"


def excluded_ids(studies: Sequence[ExcludedStudy], limits: Limits) -> str:
    return id_list([e.study_id for e in studies], limits)


def name_list(values: Sequence[str], shown: int = 4) -> str:
    """The first ``shown`` names, each clipped, and how many more."""
    if not values:
        return "not recorded"
    text = ", ".join(clip(n, 40) for n in values[:shown])
    return text + (f" and {len(values) - shown} more" if len(values) > shown else "")


def clip(text: str, length: int) -> str:
    """``text`` cut with an ellipsis to ``length`` characters."""
    return text if len(text) <= length else text[: length - 1].rstrip() + "…"


def id_list(values: Sequence[str], limits: Limits, json_name: str = "review JSON") -> str:
    """Study ids up to the current limit, escaped, with a pointer to the JSON for the rest."""
    if not values:
        return "none"
    # Ids read back from records or the CSV are not guaranteed markup-safe: escape them.
    shown = escape(", ".join(values[: limits.listed_ids]))
    more = len(values) - limits.listed_ids
    return shown + (f" … and {more} more in the {json_name}" if more > 0 else "")


def free_text(text: str, fonts: Fonts) -> str:
    """User text made safe for paragraph markup in the body font."""
    return safe_text.markup_text(text, fonts.regular)


def quality_document(buffer: Any, *, title: str, subject: str, creator: str) -> Any:
    """The A4 page template shared by the quality-review and reader-agreement PDFs (byte-stable)."""
    from reportlab.platypus import SimpleDocTemplate

    return SimpleDocTemplate(
        buffer,
        pagesize=A4,
        leftMargin=MARGIN,
        rightMargin=MARGIN,
        topMargin=MARGIN,
        bottomMargin=MARGIN + 4 * mm,
        title=title,
        author="segreport",
        subject=subject,
        creator=creator,
        invariant=1,
    )
