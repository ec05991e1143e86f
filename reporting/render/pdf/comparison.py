"""The prior-study comparison in the PDF: a short "Compared with the study of DATE" paragraph and,
when the studies share a segment model, the change map beside it.

Wording is decided here from the record's ``comparison`` (rules in :mod:`reporting.comparison`);
the map is drawn by :mod:`reporting.render.diagram` as the ``change`` kind.
"""

from __future__ import annotations

from reportlab.platypus import Flowable, KeepTogether, Table, TableStyle

from reporting.comparison import Comparison, TerritoryChange, segments_compared
from reporting.render import diagram
from reporting.render.change_map import response_words
from reporting.render.diagram import MapSpec
from reporting.render.fonts import Fonts
from reporting.render.pdf.styles import Styles, paragraph, section_heading
from reporting.render.scheme import MapKind
from reporting.render.vector import DrawingFlowable
from reporting.results import Analysis, NoteKind
from reporting.wording import stage_words

TERRITORY_WORDS = {
    TerritoryChange.NEW: "new ischaemia",
    TerritoryChange.UNCHANGED: "ischaemia unchanged",
    TerritoryChange.IMPROVED: "ischaemia improved (fewer segments)",
    TerritoryChange.WORSENED: "ischaemia worsened (more segments)",
    TerritoryChange.RESOLVED: "ischaemia resolved",
    TerritoryChange.NONE: "no ischaemia then or now",
}
COMPARISON_NOTE_KINDS = frozenset({NoteKind.COMPARISON, NoteKind.SEGMENTS_NOT_COMPARED})
MAP_SHARE = 0.3
"""Share of the text width the change map takes beside the paragraph."""


def opening(comparison: Comparison) -> str:
    """``Compared with the study of 2026-03-12 (ID).``; without the date (de-identified record)
    ``Compared with the prior study ID.``"""
    if comparison.prior_date is None:
        return f"Compared with the prior study {comparison.prior_study_id}."
    return (
        f"Compared with the study of {comparison.prior_date.isoformat()} "
        f"({comparison.prior_study_id})."
    )


def comparison_text(analysis: Analysis) -> list[str]:
    """The sentences of the paragraph (empty without a comparison)."""
    c = analysis.comparison
    if c is None:
        return []
    out = [opening(c)]
    parts = []
    for stage, pair in c.wmsi.items():
        then = "–" if pair.prior is None else f"{pair.prior:.2f}"
        now = "–" if pair.current is None else f"{pair.current:.2f}"
        parts.append(f"{stage_words(stage, analysis.protocol)} {then} then, {now} now")
    if parts:
        out.append("WMSI: " + "; ".join(parts) + ".")
    if c.territories:
        out.append(
            "Territories: "
            + "; ".join(f"{t.value} {TERRITORY_WORDS[v]}" for t, v in c.territories.items())
            + "."
        )
    if segments_compared(analysis):
        if c.changed_segments:
            out.append(
                "Segments whose response changed: "
                + "; ".join(
                    f"{s.number} ({response_words(s.prior_response)} → {response_words(s.response)})"
                    for s in c.changed_segments
                )
                + "."
            )
        else:
            out.append("No segment's response changed.")
    out += [n.text for n in analysis.notes if n.kind in COMPARISON_NOTE_KINDS]
    return out


def comparison_block(analysis: Analysis, width: float, fonts: Fonts, st: Styles) -> list[Flowable]:
    """Heading, paragraph and change map; nothing without a comparison."""
    sentences = comparison_text(analysis)
    if not sentences:
        return []
    text = paragraph(" ".join(sentences), st["para"])
    heading = section_heading("Comparison with the prior study", st)
    if not segments_compared(analysis):
        return [KeepTogether([heading, text])]
    cell = width * MAP_SHARE
    drawing = diagram.bullseye(
        analysis, MapSpec(MapKind.CHANGE), radius=min(44.0, cell / 2 - 14), fonts=fonts, width=cell
    )
    table = Table([[text, DrawingFlowable(drawing)]], colWidths=[width - cell, cell])
    table.setStyle(
        TableStyle(
            [
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LEFTPADDING", (0, 0), (-1, -1), 0),
                ("RIGHTPADDING", (0, 0), (0, 0), 8),
            ]
        )
    )
    return [KeepTogether([heading, table])]
