"""Small pieces of wording shared by the record, the reports, the exports and the command line.

Kept free of heavy imports so the command line can use it for its help text.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from enum import Enum
from functools import lru_cache

CAUTIONS = (
    "Decision support for qualified clinicians: this report does not replace the judgement of the reading physician.",
    "Computed values (indices, responses, targets, risk findings) must be reviewed by the physician before use.",
    "Follow local protocols, current product labelling for stress and enhancing agents, and licensed practice.",
)
"""The cautions every report, record and export carries."""

CAUTION_LINE = (
    "Decision support for qualified clinicians: computed values need physician review; "
    "follow local protocols, product labelling and licensed practice."
)
"""The cautions in one line, for help texts and short outputs."""


WALL_MOTION_WORDS = {
    1: "normal",
    2: "hypokinetic",
    3: "akinetic",
    4: "dyskinetic",
    5: "aneurysmal",
}
"""Words for wall-motion scores (Lang RM et al., JASE 2015;28:1; 5 = aneurysmal on older scales)."""

PERFUSION_WORDS = {1: "normal", 2: "reduced or delayed", 3: "absent"}
"""Words for contrast perfusion visual scores (Porter TR et al., JASE 2018, from memory)."""


def sentence_case(text: str) -> str:
    """Capitalise the first letter only."""
    return text[:1].upper() + text[1:]


EXERCISE_STAGE_WORDS = {"low_dose": "low workload", "peak": "peak exercise"}
"""Stage words of a treadmill or bicycle study, which has workloads, not doses: "low dose" belongs
to dobutamine only (common practice). The record keeps the stage keys."""


@lru_cache(maxsize=256)
def stage_words(stage: Enum, protocol: Enum | None = None) -> str:
    """A stage name as words: ``low_dose`` -> ``low dose``; ``low workload`` in an exercise study.

    Cached: a few stages × protocols, asked for many times in every narrative.
    """
    if protocol is not None:
        from reporting.model import EXERCISE_PROTOCOLS  # lazy: reporting.model imports this module

        if protocol in EXERCISE_PROTOCOLS and stage.value in EXERCISE_STAGE_WORDS:
            return EXERCISE_STAGE_WORDS[str(stage.value)]
    return str(stage.value).replace("_", " ")


def and_list(values: Iterable[int | str]) -> str:
    """``[1, 2, 3]`` -> ``"1, 2 and 3"``."""
    items = [str(v) for v in values]
    if len(items) <= 1:
        return "".join(items)
    return f"{', '.join(items[:-1])} and {items[-1]}"


def number_list(numbers: Iterable[int]) -> str:
    """``[1, 2, 7]`` -> ``"1, 2, 7"``."""
    return ", ".join(str(n) for n in numbers)


def number_ranges(numbers: Iterable[int]) -> str:
    """Consecutive runs of three or more shortened: ``[2, 3, 4, 9]`` -> ``"2–4, 9"``."""
    runs: list[list[int]] = []
    for n in numbers:
        if runs and n == runs[-1][-1] + 1:
            runs[-1].append(n)
        else:
            runs.append([n])
    return ", ".join(f"{r[0]}–{r[-1]}" if len(r) > 2 else number_list(r) for r in runs)


def shown_target_bpm(target_bpm: float) -> int:
    """The target heart rate as printed: rounded up, since a whole-bpm peak must reach all of it."""
    return math.ceil(target_bpm)


def shown_percent(percent: float) -> int:
    """A heart rate as % of the predicted maximum, as printed: rounded down, never overstated."""
    return math.floor(percent)


def addendum_label(author: str, at: str) -> str:
    """``Addendum (author, 2026-10-15 14:02)``: how every output heads an addendum."""
    return f"Addendum ({author}, {at[:16].replace('T', ' ')})"


_SUPERSEDING_KIND = {"appended": "Addendum", "corrected": "Corrected report"}


def supersession_words(
    status: str, version: int, supersedes: int, reason: str | None
) -> tuple[str, str]:
    """The label and text saying which version a signed ``status`` version (amended, corrected or
    appended) supersedes and why: the PDF's page-1 line, and the same words in HL7 and FHIR."""
    kind = _SUPERSEDING_KIND.get(status, "Amended report")
    return (
        kind,
        f"version {version} supersedes version {supersedes}. Reason: {reason or 'not given'}",
    )
