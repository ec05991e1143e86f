"""The lab's phrase library: standard sentences the reader inserts into the impression.

A phrase library is a YAML file (``segreport serve --phrases FILE``; the built-in starter set is
``reporting/data/phrases.yaml``, written for this tool)::

    phrases:
      - code: .rec-angio            # what the reader types in the impression box
        title: Refer for angiography
        field: recommendations      # impression | recommendations | either (default)
        text: Coronary angiography is suggested given ischaemia in the {territory} territory.

A phrase may hold slots in braces, filled from the analysis of the study being read; the slot set
is :data:`SLOTS`, defined here and nowhere else. An unknown slot, a repeated code, a malformed
brace or an unknown key is refused when the file is loaded, each as a located
:class:`~reporting.errors.InputError` (``FILE: phrases.3.text``). The file is read with the
bounded, alias-free reader of :mod:`reporting.documents` and may be at most
:data:`MAX_PHRASES_BYTES` long.
"""

from __future__ import annotations

import logging
import string
from collections.abc import Callable
from functools import cache
from pathlib import Path
from typing import Annotated, Any

from pydantic import BaseModel, ConfigDict, Field, StringConstraints, ValidationError

from reporting.errors import InputError, InputErrors
from reporting.results import Analysis
from reporting.vocabulary import Vocabulary
from reporting.wording import number_list, shown_percent, stage_words

log = logging.getLogger(__name__)

MAX_PHRASES_BYTES = 256_000
"""Largest phrase file read (a few hundred sentences fit in far less)."""
MAX_PHRASES = 500
"""Most phrases a library may hold (the page lists them all)."""
BUILT_IN = "phrases.yaml"
"""The starter set shipped in ``reporting/data``."""
NOT_AVAILABLE = "[{name}: not available]"
"""What a slot becomes when the study has no value for it (visible, so the reader edits it)."""


class PhraseField(Vocabulary):
    """Which box of the entry page a phrase is meant for."""

    IMPRESSION = "impression"
    """The reader's impression."""
    RECOMMENDATIONS = "recommendations"
    """The reader's recommendations."""
    EITHER = "either"
    """Either box."""


def _joined(items: list[str]) -> str:
    if not items:
        return ""
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]


def _wmsi(stage: str) -> Callable[[Analysis], str | None]:
    def value(a: Analysis) -> str | None:
        found = {s.value: v for s, v in a.wmsi.items()}.get(stage)
        return None if found is None else f"{found:.2f}"

    return value


def _lvef(stage: str) -> Callable[[Analysis], str | None]:
    def value(a: Analysis) -> str | None:
        h = {s.value: v for s, v in a.haemodynamics.items()}.get(stage)
        return None if h is None or h.lvef_percent is None else f"{h.lvef_percent:.0f} %"

    return value


def _peak_stage(a: Analysis) -> str | None:
    stages = {s.value: s for s in a.stages}
    return stage_words(stages["peak"], a.protocol) if "peak" in stages else None


def _hr_percent(a: Analysis) -> str | None:
    p = a.stress.peak_hr_percent_of_predicted
    return None if p is None else f"{shown_percent(p)} %"


SLOTS: dict[str, tuple[str, Callable[[Analysis], str | None]]] = {
    "territory": (
        "Ischaemic territories, e.g. 'LAD' or 'LAD and RCA'.",
        lambda a: _joined([t.value for t in a.conclusion.ischemic_territories]) or None,
    ),
    "ischemic_segments": (
        "Ischaemic segment numbers, e.g. '4, 10'.",
        lambda a: number_list(a.conclusion.ischemic_segments) or None,
    ),
    "viable_segments": (
        "Viable segment numbers.",
        lambda a: number_list(a.conclusion.viable_segments) or None,
    ),
    "wmsi_rest": ("Wall-motion score index at rest (2 decimals).", _wmsi("rest")),
    "wmsi_peak": ("Wall-motion score index at peak stress (2 decimals).", _wmsi("peak")),
    "lvef_rest": ("LV ejection fraction at rest, e.g. '58 %'.", _lvef("rest")),
    "lvef_peak": ("LV ejection fraction at peak stress.", _lvef("peak")),
    "peak_hr_percent": ("Peak heart rate as % of the age-predicted maximum.", _hr_percent),
    "peak_stage": (
        "The peak stage in the protocol's words ('peak', 'peak exercise').",
        _peak_stage,
    ),
    "protocol": ("The kind of stress ('dobutamine', 'treadmill', …).", lambda a: a.protocol.value),
    "risk": (
        "The risk band ('low', 'intermediate', 'high', 'not graded').",
        lambda a: a.conclusion.risk.value.replace("_", " "),
    ),
}
"""Every slot a phrase may use: name -> (what it holds, how it is read from the analysis)."""


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, str_strip_whitespace=True)


Code = Annotated[str, StringConstraints(pattern=r"^\.[a-z0-9][a-z0-9-]{0,31}$")]


class Phrase(_Model):
    """One standard sentence of the lab."""

    code: Code = Field(
        description="Short code typed in the impression box: a dot, then lower-case letters, digits "
        "or '-' (at most 32), e.g. '.rec-angio'."
    )
    title: str = Field(min_length=1, max_length=80, description="Name shown in the phrase list.")
    text: str = Field(
        min_length=1,
        max_length=2000,
        description="The sentence; {slot} names are filled from the analysis (see reporting.phrases.SLOTS).",
    )
    field: PhraseField = Field(
        default=PhraseField.EITHER, description="Box the phrase is meant for."
    )

    def slots(self) -> list[str]:
        """Slot names used in the text, in order (the text is checked when loaded)."""
        return [name for _, name, _, _ in string.Formatter().parse(self.text) if name]


class PhraseLibrary(_Model):
    """A lab's phrase library."""

    phrases: list[Phrase] = Field(
        max_length=MAX_PHRASES, description="The phrases, in the order the page lists them."
    )


class FilledPhrase(_Model):
    """A phrase with its slots filled from one analysis (what the page inserts)."""

    code: str = Field(description="Short code.")
    title: str = Field(description="Name shown in the phrase list.")
    field: PhraseField = Field(description="Box the phrase is meant for.")
    text: str = Field(description="The sentence with every slot filled.")
    missing: list[str] = Field(description="Slots the study has no value for (marked in the text).")


def _text_problems(text: str) -> list[str]:
    """What is wrong with the braces of a phrase text (empty when it is fine)."""
    try:
        parts = list(string.Formatter().parse(text))
    except ValueError as exc:
        return [f"malformed braces ({exc}); write a slot as {{name}} and a brace as {{{{ or }}}}"]
    problems = []
    for _, name, spec, conversion in parts:
        if name is None:
            continue
        if name not in SLOTS:
            problems.append(
                f"unknown slot {{{name}}}; the slots are {', '.join(sorted(SLOTS))}"
                if name
                else "empty slot {}; name a slot, e.g. {territory}"
            )
        elif spec or conversion:
            problems.append(f"slot {{{name}}} takes no format or conversion")
    return problems


def parse_library(data: Any, where: str) -> PhraseLibrary:
    """A :class:`PhraseLibrary` from parsed YAML, every problem located at ``where: path``."""
    problems: list[InputError] = []
    try:
        library = PhraseLibrary.model_validate(data)
    except ValidationError as exc:
        for error in exc.errors():
            path = ".".join(str(p) for p in error["loc"])
            problems.append(InputError(f"{where}: {path}" if path else where, error["msg"]))
        raise InputErrors(problems) from None
    seen: dict[str, int] = {}
    for i, phrase in enumerate(library.phrases):
        for problem in _text_problems(phrase.text):
            problems.append(InputError(f"{where}: phrases.{i}.text", problem))
        if phrase.code in seen:
            problems.append(
                InputError(
                    f"{where}: phrases.{i}.code",
                    f"code {phrase.code} is already used by phrase {seen[phrase.code]}",
                )
            )
        seen.setdefault(phrase.code, i)
    if problems:
        raise InputErrors(problems)
    return library


def load_library(path: Path) -> PhraseLibrary:
    """Read a phrase library file (YAML), bounded and checked; problems are located errors."""
    from reporting.documents import check_suffix, parse_yaml, read_text

    text = read_text(
        check_suffix(path, (".yaml", ".yml")), what="phrase file", max_bytes=MAX_PHRASES_BYTES
    )
    library = parse_library(parse_yaml(text, str(path)), str(path))
    log.info("%s: %d phrases", path, len(library.phrases))
    return library


@cache
def built_in_library() -> PhraseLibrary:
    """The starter set shipped with segreport."""
    from reporting.documents import bundled_yaml

    return parse_library(bundled_yaml("reporting.data", BUILT_IN), f"built-in {BUILT_IN}")


def slot_values(analysis: Analysis) -> dict[str, str | None]:
    """Every slot's value for ``analysis`` (``None`` when the study has none)."""
    return {name: read(analysis) for name, (_, read) in SLOTS.items()}


def fill(phrase: Phrase, values: dict[str, str | None]) -> FilledPhrase:
    """``phrase`` with its slots filled from ``values`` (from :func:`slot_values`)."""
    missing: list[str] = []
    out: list[str] = []
    for literal, name, _, _ in string.Formatter().parse(phrase.text):
        out.append(literal)
        if name is None:
            continue
        value = values.get(name)
        if value is None:
            missing.append(name)
            value = NOT_AVAILABLE.format(name=name.replace("_", " "))
        out.append(value)
    return FilledPhrase(
        code=phrase.code, title=phrase.title, field=phrase.field, text="".join(out), missing=missing
    )


def filled_library(library: PhraseLibrary, analysis: Analysis) -> list[FilledPhrase]:
    """Every phrase of ``library`` filled from ``analysis``."""
    values = slot_values(analysis)
    return [fill(p, values) for p in library.phrases]
