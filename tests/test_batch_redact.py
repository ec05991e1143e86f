"""De-identified batch messages keep only words of the study format (issue 11, item 1)."""

from __future__ import annotations

import pytest

from reporting.batch import redact


@pytest.mark.parametrize(
    ("location", "shown"),
    [
        ("stages.rest.heart_rate_bpm", "stages.rest.heart_rate_bpm"),  # field names stay
        ("stages.peak.wall_motion.17", "stages.peak.wall_motion.17"),  # a segment number stays
        # a file named after a patient, inside a folder named after them
        ("/data/Peregrine_Ashdown-Vale/map.yaml: territories.17.LAD", "….…: territories.17.LAD"),
        ("study.id.1122334", "study.id.…"),  # a mapping key holding a record number
        ("curves 2026-03-09.csv: line 12", "… ….…: line 12"),  # a date in a file name
        ("patient.Ludovica", "patient.…"),  # a name used as a key
    ],
    ids=["fields", "segment", "path", "number", "date", "name-key"],
)
def test_locations_keep_only_words_of_the_study_format(location: str, shown: str) -> None:
    assert redact.safe_location(location) == shown


def test_problems_hold_no_input() -> None:
    # the fixed texts hold no digit that could be taken for an input value
    for problem in (
        redact.invalid("study.date"),
        redact.cannot_write(),
        redact.internal(ValueError("'Peregrine' 1122334")),
        redact.duplicate("F-0123"),
    ):
        text = problem.message.replace("F-0123", "")
        assert not any(c.isdigit() for c in text), problem
        assert "Peregrine" not in text
