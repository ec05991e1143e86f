"""The written report: findings, impression by territory, stress adequacy, perfusion and notes.

The plain-text form (:func:`narrative_text`) has one block per section, blocks separated by a blank
line, the first line of a block being its heading and every further line one paragraph. The PDF
reads that form, so a lab template changes the PDF too.

Modules: ``words`` (vocabulary, number lists and the printed heart-rate figures), ``impression``
(the summary sentence, the impression by territory, high-risk findings), ``sections`` (stress, wall
motion, perfusion and kinetics paragraphs) and ``document`` (the sections in order and the jinja2
templates). This module holds the public names only.
"""

from __future__ import annotations

from reporting.render.narrative.conduct import reader_paragraphs
from reporting.render.narrative.document import (
    HTML_TEMPLATE,
    TEXT_TEMPLATE,
    Audience,
    Narrative,
    Section,
    build_narrative,
    computed_impression_text,
    environment,
    impression_differs,
    impression_state_line,
    narrative_html,
    narrative_text,
    reader_impression_in_headline,
    text_blocks,
)
from reporting.render.narrative.impression import risk_fact, summary
from reporting.render.narrative.sections import stress_paragraphs
from reporting.render.narrative.words import signed
from reporting.wording import shown_percent, shown_target_bpm

__all__ = [
    "HTML_TEMPLATE",
    "TEXT_TEMPLATE",
    "Audience",
    "Narrative",
    "Section",
    "build_narrative",
    "computed_impression_text",
    "environment",
    "impression_differs",
    "impression_state_line",
    "narrative_html",
    "narrative_text",
    "reader_impression_in_headline",
    "reader_paragraphs",
    "risk_fact",
    "shown_percent",
    "shown_target_bpm",
    "signed",
    "stress_paragraphs",
    "summary",
    "text_blocks",
]
