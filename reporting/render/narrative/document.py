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

import jinja2

from reporting.errors import InputError
from reporting.render.narrative.conduct import conduct_paragraphs, reader_paragraphs
from reporting.render.narrative.impression import high_risk_paragraphs, impression, summary
from reporting.render.narrative.sections import (
    kinetics_paragraphs,
    perfusion_paragraphs,
    stress_paragraphs,
    wall_motion_paragraphs,
)
from reporting.results import Analysis

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


def build_narrative(analysis: Analysis, include_cautions: bool = True) -> Narrative:
    """Decide every sentence of the narrative."""
    sections = [
        Section("impression", "Impression", tuple(impression(analysis))),
        *reader_sections(analysis),
        Section("stress", "Stress and adequacy", tuple(stress_paragraphs(analysis))),
        Section("conduct", "Test conduct", tuple(conduct_paragraphs(analysis))),
        Section("wall_motion", "Wall motion", tuple(wall_motion_paragraphs(analysis))),
        Section("perfusion", "Perfusion", tuple(perfusion_paragraphs(analysis))),
        Section("kinetics", "Replenishment kinetics", tuple(kinetics_paragraphs(analysis))),
        Section("high_risk", "High-risk findings", tuple(high_risk_paragraphs(analysis))),
        Section(
            "other_findings",
            "Other echocardiographic findings",
            reader_paragraphs(analysis.study.other_findings),
        ),
        Section(
            "notes",
            "Image quality and protocol notes",
            tuple(n.text for n in analysis.notes),
        ),
        Section(
            "comments",
            "Reader's comments",
            tuple(analysis.study.comments.splitlines()) if analysis.study.comments else (),
        ),
    ]
    if include_cautions:
        sections.append(Section("cautions", "Cautions", tuple(analysis.cautions)))
    kept = tuple(s for s in sections if s.paragraphs)
    return Narrative(study_id=analysis.study.id, summary=summary(analysis), sections=kept)


def reader_sections(analysis: Analysis) -> list[Section]:
    """The reader's own impression and recommendations, as written (left out when absent)."""
    study = analysis.study
    return [
        Section("reader_impression", "Reader's impression", reader_paragraphs(study.impression)),
        Section("recommendations", "Recommendations", reader_paragraphs(study.recommendations)),
    ]


# --- template environment ---------------------------------------------------------------------


def _autoescape(name: str | None) -> bool:
    return name is not None and name.endswith((".html.j2", ".html", ".htm"))


@cache
def environment(templates_dir: str | None = None) -> jinja2.Environment:
    """The jinja2 environment; a lab folder, when given, is searched before the packaged one."""
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
    )


def _render(name: str, narrative: Narrative, templates_dir: Path | str | None) -> str:
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
) -> str:
    """The narrative as plain text (blocks of heading + paragraphs, one blank line between)."""
    text = _render(TEXT_TEMPLATE, build_narrative(analysis, include_cautions), templates_dir)
    lines = [line.rstrip() for line in text.strip("\n").splitlines()]
    return "\n".join(lines) + "\n"


def narrative_html(
    analysis: Analysis,
    templates_dir: Path | str | None = None,
    *,
    include_cautions: bool = True,
) -> str:
    """The narrative as an HTML fragment (user text escaped by the environment)."""
    return _render(HTML_TEMPLATE, build_narrative(analysis, include_cautions), templates_dir)


def text_blocks(text: str) -> list[tuple[str, list[str]]]:
    """Split plain narrative text into (heading, paragraphs) blocks."""
    blocks: list[tuple[str, list[str]]] = []
    for chunk in text.strip().split("\n\n"):
        lines = [line.strip() for line in chunk.splitlines() if line.strip()]
        if lines:
            blocks.append((lines[0], lines[1:]))
    return blocks
