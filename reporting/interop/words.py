"""The report's own words for every export: the same functions the PDF prints with.

The conclusion a hospital system shows (FHIR ``DiagnosticReport.conclusion``, the HL7 conclusion
OBX, the SR's Conclusion item) is the PDF's Impression section word for word, headed by the PDF's
one-sentence summary; nothing here re-words a finding.
"""

from __future__ import annotations

from reporting.interop.release import Release
from reporting.render.narrative.impression import (
    high_risk_paragraphs,
    summary,
    territory_sentence,
)
from reporting.results import Analysis
from reporting.segments import Territory
from reporting.wording import addendum_label, supersession_words


def headline(analysis: Analysis) -> str:
    """The PDF's one-sentence answer (its summary box)."""
    return summary(analysis)


def conclusion_text(analysis: Analysis) -> str:
    """The Impression section as one text, one paragraph a line (the headline first): the
    record's computed impression, so a signed record sent later keeps the words it was signed
    with, whatever a later version would word."""
    return analysis.computed_impression


def supersession_text(analysis: Analysis, release: Release) -> str | None:
    """The signed PDF's page-1 line of a version that supersedes another (which one, and why);
    None for a first version, and in a de-identified export (the reason is free text)."""
    before = release.predecessor
    if before is None or analysis.study.deidentified:
        return None
    kind, text = supersession_words(
        release.state.value, release.version, before.version, before.reason
    )
    return f"{kind}: {text}"


def release_notes(analysis: Analysis, release: Release) -> list[str]:
    """What the signed PDF prints on page 1 about the version's history: the line of a version
    that supersedes another, then each addendum (``Addendum (author, time): text``); none in a
    de-identified export (free text)."""
    superseding = supersession_text(analysis, release)
    if superseding is None:  # a first version, or de-identified (no addendum without a predecessor)
        return []
    return [superseding, *(f"{addendum_label(a.author, a.at)}: {a.text}" for a in release.addenda)]


def territory_text(analysis: Analysis, territory: Territory) -> str:
    """The PDF's sentence about one territory."""
    return territory_sentence(analysis, territory)


def high_risk_texts(analysis: Analysis) -> list[str]:
    """The PDF's high-risk finding paragraphs."""
    return high_risk_paragraphs(analysis)


def cautions_text(analysis: Analysis) -> str:
    """The cautions every report carries, one a line."""
    return "\n".join(analysis.cautions)
