"""The narrative as a document: its sections in order, and the jinja2 templates that lay them out
as plain text or HTML.

All wording is decided in Python into a small typed context (:class:`Narrative`: sections of
ready-made paragraphs); the templates in ``reporting/render/templates/`` only substitute and loop. A
lab may point at its own template folder; its files override the packaged ones of the same name.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache
from pathlib import Path
from typing import TYPE_CHECKING

from reporting.errors import InputError
from reporting.notes import REFERRER_NOTES, NoteKind
from reporting.render.narrative.conduct import conduct_paragraphs, reader_paragraphs
from reporting.render.narrative.impression import (
    Question,
    computed_impression_text,
    high_risk_paragraphs,
    impression,
    question,
    summary,
)
from reporting.render.narrative.methods import sources
from reporting.render.narrative.sections import (
    kinetics_paragraphs,
    perfusion_paragraphs,
    stress_paragraphs,
    wall_motion_paragraphs,
)
from reporting.results import Analysis, ImpressionStatus
from reporting.vocabulary import Vocabulary

if TYPE_CHECKING:  # jinja2 loads only when a template is rendered, not for the computed findings
    import jinja2

TEXT_TEMPLATE = "narrative.txt.j2"
HTML_TEMPLATE = "narrative.html.j2"


@dataclass(frozen=True)
class Section:
    """One section of the narrative: a heading and its paragraphs (plain text)."""

    key: str
    heading: str
    paragraphs: tuple[str, ...]


@dataclass(frozen=True)
class Narrative:
    """Everything the templates fill in."""

    study_id: str
    summary: str
    sections: tuple[Section, ...]


class Audience(Vocabulary):
    """Who reads the narrative."""

    READER = "reader"
    """The reading physician (entry page, text and HTML narrative): every note, sources inline."""
    REFERRER = "referrer"
    """The referring doctor (the PDF): kept notes only, no citations or formulas (see Methods)."""


HEADLINE_MAX_PARAGRAPHS = 6
"""Layout limit: a longer reader's impression is printed under its heading, not in the answer box
(a box cannot break across pages)."""
HEADLINE_MAX_CHARS = 1500
"""Layout limit, as above, in characters."""


def reader_impression_in_headline(analysis: Analysis) -> bool:
    """True when the answer box holds the reader's whole impression (short enough to fit)."""
    words = reader_paragraphs(analysis.study.impression)
    return (
        bool(words)
        and len(words) <= HEADLINE_MAX_PARAGRAPHS
        and sum(map(len, words)) <= HEADLINE_MAX_CHARS
    )


def impression_differs(analysis: Analysis) -> bool:
    """True when the reader's impression is not the computed findings (or their headline)."""
    words = " ".join(" ".join(reader_paragraphs(analysis.study.impression)).split())
    if not words:
        return False
    computed = {
        " ".join(computed_impression_text(analysis).split()),
        " ".join(summary(analysis).split()),
    }
    return words.casefold() not in {c.casefold() for c in computed}


def impression_state_line(analysis: Analysis) -> str:
    """The mark of an impression that was not confirmed against the findings computed now."""
    if analysis.impression_status is ImpressionStatus.STALE:
        return (
            "Impression written against earlier findings: the scores changed after the reader "
            "confirmed it; awaiting the reader's confirmation."
        )
    if analysis.impression_status is ImpressionStatus.UNCONFIRMED:
        return "Impression not yet confirmed against the computed findings."
    return ""


def build_narrative(
    analysis: Analysis, include_cautions: bool = True, audience: Audience = Audience.READER
) -> Narrative:
    """Decide every sentence of the narrative for its audience."""
    referrer = audience is Audience.REFERRER
    reader, *computed = impression_sections(analysis, audience)
    sections = [
        reader,  # the reader's words first, their recommendations next, then the computed findings
        Section(
            "recommendations",
            "Recommendations",
            reader_paragraphs(analysis.study.recommendations),
        ),
        *computed,
        Section(
            "stress", "Stress and adequacy", tuple(stress_paragraphs(analysis, cite=not referrer))
        ),
        Section("conduct", "Test conduct", tuple(conduct_paragraphs(analysis))),
        Section("wall_motion", "Wall motion", tuple(wall_motion_paragraphs(analysis))),
        Section("perfusion", "Perfusion", tuple(perfusion_paragraphs(analysis))),
        Section(
            "kinetics",
            "Replenishment kinetics",
            tuple(
                kinetics_paragraphs(analysis, cite=not referrer, checks=_keeps(analysis, audience))
            ),
        ),
        Section("high_risk", "High-risk findings", tuple(high_risk_paragraphs(analysis))),
        Section(
            "other_findings",
            "Other echocardiographic findings",
            reader_paragraphs(analysis.study.other_findings),
        ),
        Section(
            "notes",
            "Notes" if referrer else "Image quality and protocol notes",
            tuple(n.text for n in analysis.notes if not referrer or _kept(analysis, n.kind)),
        ),
        Section(
            "comments",
            "Reader's comments",
            tuple(analysis.study.comments.splitlines()) if analysis.study.comments else (),
        ),
    ]
    if include_cautions:
        sections.append(Section("cautions", "Cautions", tuple(analysis.cautions)))
    if referrer:
        sections.append(Section("methods", "Methods", (methods_line(analysis),)))
    kept = tuple(s for s in sections if s.paragraphs)
    return Narrative(study_id=analysis.study.id, summary=summary(analysis), sections=kept)


def _kept(analysis: Analysis, kind: NoteKind) -> bool:
    """Printed for the referrer: a finding, or a reader note the reader kept; the viability note
    only when the headline does not already answer a viability question."""
    if kind is NoteKind.VIABILITY and question(analysis) is Question.VIABILITY:
        return False
    return kind in REFERRER_NOTES or kind in analysis.study.kept_notes


def _keeps(analysis: Analysis, audience: Audience) -> bool:
    return audience is Audience.READER or NoteKind.FIT_QUALITY in analysis.study.kept_notes


def impression_sections(analysis: Analysis, audience: Audience) -> list[Section]:
    """The reader's impression (when written) and the computed findings; else the computed draft.

    For the referrer the answer box already holds a short reader's impression, so it is not
    repeated; the computed findings follow under their own heading.
    """
    computed = tuple(impression(analysis))
    words = reader_paragraphs(analysis.study.impression)
    if not words:
        return [Section("impression", "Impression", computed)]
    state = impression_state_line(analysis)
    shown = (
        () if audience is Audience.REFERRER and reader_impression_in_headline(analysis) else words
    )
    if shown and state:
        shown = (state, *shown)
    return [
        Section("impression", "Impression", shown),
        Section("computed_findings", "Computed findings", computed),
    ]


def methods_line(analysis: Analysis) -> str:
    """One line naming the methods and sources behind the referrer's pages."""
    return "Sources: " + "; ".join(sources(analysis)) + "."


# --- template environment ---------------------------------------------------------------------


def _autoescape(name: str | None) -> bool:
    return name is not None and name.endswith((".html.j2", ".html", ".htm"))


@cache
def environment(templates_dir: str | None = None) -> jinja2.Environment:
    """The jinja2 environment; a lab folder, when given, is searched before the packaged one."""
    import jinja2

    loaders: list[jinja2.BaseLoader] = []
    if templates_dir is not None:
        loaders.append(jinja2.FileSystemLoader(templates_dir))
    loaders.append(jinja2.PackageLoader("reporting.render", "templates"))
    return jinja2.Environment(
        loader=jinja2.ChoiceLoader(loaders),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        autoescape=_autoescape,
        keep_trailing_newline=True,
        # templates are read once per process: checking each file's time on every render cost
        # about 5 % of the lab server's time (restart the server after editing a lab template)
        auto_reload=False,
    )


def _render(name: str, narrative: Narrative, templates_dir: Path | str | None) -> str:
    import jinja2

    env = environment(str(templates_dir) if templates_dir is not None else None)
    try:
        return env.get_template(name).render(
            study_id=narrative.study_id, summary=narrative.summary, sections=narrative.sections
        )
    except jinja2.TemplateError as exc:
        where = f"template {name}" + (f" in {templates_dir}" if templates_dir is not None else "")
        line = getattr(exc, "lineno", None)
        raise InputError(where + (f", line {line}" if line else ""), str(exc)) from None


def narrative_text(
    analysis: Analysis,
    templates_dir: Path | str | None = None,
    *,
    include_cautions: bool = True,
    audience: Audience = Audience.READER,
) -> str:
    """The narrative as plain text (blocks of heading + paragraphs, one blank line between)."""
    narrative = build_narrative(analysis, include_cautions, audience)
    text = _render(TEXT_TEMPLATE, narrative, templates_dir)
    lines = [line.rstrip() for line in text.strip("\n").splitlines()]
    return "\n".join(lines) + "\n"


def narrative_html(
    analysis: Analysis,
    templates_dir: Path | str | None = None,
    *,
    include_cautions: bool = True,
    audience: Audience = Audience.READER,
) -> str:
    """The narrative as an HTML fragment (user text escaped by the environment)."""
    return _render(
        HTML_TEMPLATE, build_narrative(analysis, include_cautions, audience), templates_dir
    )


def text_blocks(text: str) -> list[tuple[str, list[str]]]:
    """Split plain narrative text into (heading, paragraphs) blocks."""
    blocks: list[tuple[str, list[str]]] = []
    for chunk in text.strip().split("\n\n"):
        lines = [line.strip() for line in chunk.splitlines() if line.strip()]
        if lines:
            blocks.append((lines[0], lines[1:]))
    return blocks
