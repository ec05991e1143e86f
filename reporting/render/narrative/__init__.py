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

from typing import TYPE_CHECKING

from reporting.lazy import lazy_attributes

# The names load on first use: every analysis words its computed findings
# (reporting.render.narrative.impression), and that must not load the document, its sections or
# the templates.
_LAZY = {
    "reader_paragraphs": "reporting.render.narrative.conduct",
    "HTML_TEMPLATE": "reporting.render.narrative.document",
    "TEXT_TEMPLATE": "reporting.render.narrative.document",
    "Audience": "reporting.render.narrative.document",
    "Narrative": "reporting.render.narrative.document",
    "Section": "reporting.render.narrative.document",
    "build_narrative": "reporting.render.narrative.document",
    "environment": "reporting.render.narrative.document",
    "impression_differs": "reporting.render.narrative.document",
    "impression_state_line": "reporting.render.narrative.document",
    "narrative_html": "reporting.render.narrative.document",
    "narrative_text": "reporting.render.narrative.document",
    "reader_impression_in_headline": "reporting.render.narrative.document",
    "text_blocks": "reporting.render.narrative.document",
    "computed_impression_text": "reporting.render.narrative.impression",
    "risk_fact": "reporting.render.narrative.impression",
    "summary": "reporting.render.narrative.impression",
    "stress_paragraphs": "reporting.render.narrative.sections",
    "signed": "reporting.render.narrative.words",
    "shown_percent": "reporting.wording",
    "shown_target_bpm": "reporting.wording",
}

if TYPE_CHECKING:
    from reporting.render.narrative.conduct import reader_paragraphs
    from reporting.render.narrative.document import (
        HTML_TEMPLATE,
        TEXT_TEMPLATE,
        Audience,
        Narrative,
        Section,
        build_narrative,
        environment,
        impression_differs,
        impression_state_line,
        narrative_html,
        narrative_text,
        reader_impression_in_headline,
        text_blocks,
    )
    from reporting.render.narrative.impression import computed_impression_text, risk_fact, summary
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

__getattr__ = lazy_attributes(__name__, _LAZY)
