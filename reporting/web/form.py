"""What the entry form offers, built from the study model: choices from its enums, stages and fields
by protocol.

Every choice list on the page comes from a :class:`~enum.StrEnum` of :mod:`reporting.procedure`
or :mod:`reporting.model`, never from a hand-typed list, so a value added to the model appears on
the page. :func:`protocol_views` says which stages and fields each protocol shows: a treadmill or
bicycle study has workloads ("Low workload", "Peak exercise", the words of
:func:`reporting.wording.stage_words`), heart-rate recovery and no dobutamine dose or atropine; a
vasodilator study has its agent and dose and no low-dose stage; dobutamine keeps dose and atropine.
The page still shows a hidden field or stage that holds a value, so nothing in a file is hidden.
"""

from __future__ import annotations

import re
from enum import StrEnum
from typing import Any

from reporting.model import EXERCISE_PROTOCOLS, STAGE_ORDER, Protocol, Stage
from reporting.notes import REFERRER_NOTES, NoteKind
from reporting.procedure import (
    DOSE_FIELD,
    DOSE_UNITS,
    Arrhythmia,
    BaselineEcg,
    BaselineRhythm,
    Complication,
    ImageQuality,
    Medications,
    MedicationUse,
    StopReason,
    VasodilatorAgent,
)
from reporting.wording import sentence_case, stage_words

STAGE_FIELDS_BY_PROTOCOL: dict[Protocol, frozenset[str]] = {
    Protocol.DOBUTAMINE: frozenset({"dose_ug_kg_min", "atropine_mg"}),
    Protocol.TREADMILL: frozenset(),
    Protocol.BICYCLE: frozenset(),
    Protocol.VASODILATOR: frozenset(),
    Protocol.PACING: frozenset(),
}
"""Protocol-specific stage fields shown (the others: heart rate, pressures, LVEF, ESV, image quality,
symptoms, are shown for every protocol)."""
PROTOCOL_SPECIFIC_STAGE_FIELDS = frozenset({"dose_ug_kg_min", "atropine_mg"})
NO_LOW_DOSE = frozenset({Protocol.VASODILATOR})
"""Protocols without a graded low stage (vasodilator stress: rest and stress)."""


_ABBREVIATIONS = {
    "lv": "LV",
    "st": "ST",
    "av": "AV",
    "vt": "VT",
    "q": "Q",
    "non sustained": "non-sustained",
    "pre excitation": "pre-excitation",
}
"""Words a choice list prints in their usual form (display only; the values stay as they are)."""
_WORD = re.compile(r"\b(" + "|".join(sorted(_ABBREVIATIONS, key=len, reverse=True)) + r")\b")


def words(value: StrEnum) -> str:
    """An enum value as words for a choice list: ``non_sustained_vt`` -> ``non-sustained VT``."""
    return _WORD.sub(lambda m: _ABBREVIATIONS[m.group(1)], str(value.value).replace("_", " "))


def choices(enum: type[StrEnum]) -> list[tuple[str, str]]:
    """``(value, words)`` for every member of ``enum``, in declaration order."""
    return [(m.value, words(m)) for m in enum]


PACING_STAGE_WORDS = {"low_dose": "low rate", "peak": "peak rate"}
"""Stage words of a pacing study on the page: paced rates, not doses (common practice)."""


def stage_titles(protocol: Protocol | None) -> dict[str, str]:
    """Tab titles of the stages in the protocol's words (sentence case)."""
    if protocol is Protocol.PACING:
        return {
            s.value: sentence_case(PACING_STAGE_WORDS.get(s.value, s.value)) for s in STAGE_ORDER
        }
    return {s.value: sentence_case(stage_words(s, protocol)) for s in STAGE_ORDER}


def protocol_views() -> dict[str, Any]:
    """Per protocol: its stages (with titles), the stage fields and the blocks the page shows."""
    views: dict[str, Any] = {}
    for protocol in Protocol:
        stages = [s for s in STAGE_ORDER if not (s is Stage.LOW_DOSE and protocol in NO_LOW_DOSE)]
        blocks = []
        if protocol in EXERCISE_PROTOCOLS:
            blocks.append("exercise")
        if protocol is Protocol.VASODILATOR:
            blocks.append("vasodilator")
        views[protocol.value] = {
            "stages": {s.value: stage_titles(protocol)[s.value] for s in stages},
            "stage_fields": sorted(STAGE_FIELDS_BY_PROTOCOL[protocol]),
            "blocks": blocks,
        }
    views[""] = {
        "stages": stage_titles(None),
        "stage_fields": sorted(PROTOCOL_SPECIFIC_STAGE_FIELDS),
        "blocks": [],
    }
    return views


def page_form() -> dict[str, Any]:
    """Everything the template and script need to build the procedure, order and note controls."""
    return {
        "views": protocol_views(),
        "stage_specific": sorted(PROTOCOL_SPECIFIC_STAGE_FIELDS),
        "rhythm": choices(BaselineRhythm),
        "image_quality": choices(ImageQuality),
        "medication_use": choices(MedicationUse),
        "medications": [
            (name, re.sub(r" \(.*?\)", "", (info.description or name).split(":")[0]))
            for name, info in Medications.model_fields.items()
        ],
        "lists": [
            ("baseline_ecg", "Resting ECG", choices(BaselineEcg)),
            ("stop_reasons", "Reason for stopping", choices(StopReason)),
            ("complications", "Complications", choices(Complication)),
            ("arrhythmias", "Arrhythmias", choices(Arrhythmia)),
        ],
        "vasodilator_agents": choices(VasodilatorAgent),
        "dose_fields": {agent.value: field for agent, field in DOSE_FIELD.items()},
        "dose_units": dict(DOSE_UNITS),
        "referrer_notes": sorted(k.value for k in REFERRER_NOTES),
        "note_kinds": [k.value for k in NoteKind],
    }
