"""The fast paths of the analysis give exactly what the plain definitions give (issue 11).

The findings hash is written directly (``reporting.impression.canonical_text``) instead of through
``json.dumps(findings_basis(...), sort_keys=True, ...)``; segment courses are cached; the score
strings are read through a lookup table; a study whose score sets are complete skips the per-segment
checks of the whole-study validator. Each is compared here with the definition it replaces,
over generated studies (hypothesis) and over every case of the small domains.
"""

from __future__ import annotations

import hashlib
import itertools
import json
from typing import Any

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from reporting.analysis import analyze
from reporting.impression import canonical_bytes, canonical_text, findings_basis, findings_sha256
from reporting.load import study_from_data
from reporting.model import _SCORE_CHARS, NOT_VISUALISED, Stage, _study_problems
from reporting.scoring import course_of, segment_course

PROTOCOL_STAGES = {
    "dobutamine": ["rest", "low_dose", "peak", "recovery"],
    "treadmill": ["rest", "peak", "recovery"],
    "bicycle": ["rest", "low_dose", "peak", "recovery"],
    "vasodilator": ["rest", "peak"],
}


@st.composite
def study_data(draw: st.DrawFn) -> dict[str, Any]:
    """An invented study: any protocol, segment model and scale, scores with gaps, perfusion."""
    protocol = draw(st.sampled_from(sorted(PROTOCOL_STAGES)))
    count = draw(st.sampled_from([16, 17, 18]))
    scale = draw(st.sampled_from([4, 5]))
    wall = st.text(st.sampled_from("12345x"[:scale] + "x"), min_size=count, max_size=count)
    perfusion = st.text(st.sampled_from("123x"), min_size=count, max_size=count)
    names = [
        n for n in PROTOCOL_STAGES[protocol] if n == "peak" or draw(st.booleans())
    ]  # stages kept in protocol order, as the loader requires
    stages: dict[str, Any] = {}
    for name in names:
        stage: dict[str, Any] = {"heart_rate_bpm": draw(st.integers(40, 200))}
        if draw(st.integers(0, 9)):  # now and then a stage not scored yet
            stage["wall_motion"] = draw(wall)
        if draw(st.booleans()):
            stage["perfusion"] = draw(perfusion)
        if draw(st.booleans()):
            stage["lvef_percent"] = draw(st.integers(20, 75))
        stages[name] = stage
    data: dict[str, Any] = {
        "schema_version": 1,
        "study": {"id": "FAST-0001", "date": "2026-05-04"},
        "patient": {"id": "P1", "age_years": draw(st.integers(30, 95))},
        "indication": draw(st.sampled_from(["Chest pain.", "Viability before surgery."])),
        "protocol": protocol,
        "segment_model": count,
        "wall_motion_scale": scale,
        "stages": stages,
    }
    if protocol == "treadmill":
        data["exercise"] = {
            "duration_min": draw(st.sampled_from([3.0, 7.5, 12.0])),
            "max_st_deviation_mm": draw(st.sampled_from([0.0, 1.0, 2.5])),
            "angina_index": draw(st.integers(0, 2)),
        }
    return data


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=study_data())
def test_canonical_text_is_the_documented_json(data: dict[str, Any]) -> None:
    analysis = analyze(study_from_data(data))
    basis = findings_basis(analysis)
    # the documented form: json.dumps with sorted keys, compact separators, ASCII escapes
    documented = json.dumps(basis, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    assert canonical_text(analysis) == documented
    assert canonical_bytes(basis) == documented.encode("ascii")
    expected = hashlib.sha256(documented.encode("utf-8")).hexdigest()
    assert findings_sha256(analysis) == expected == analysis.findings_sha256


def _course_uncached(scores: tuple[int | None, ...]) -> tuple[object, ...]:
    course = course_of.__wrapped__(*scores)
    return (course.response, course.baseline_stage, course.worse_from, course.implausible_stages)


def test_cached_course_is_the_computed_course_for_every_score_combination() -> None:
    # 6**4 combinations: each of rest, low dose, peak and recovery is 1-5 or not seen
    stages = (Stage.REST, Stage.LOW_DOSE, Stage.PEAK, Stage.RECOVERY)
    for scores in itertools.product([None, 1, 2, 3, 4, 5], repeat=4):
        course = segment_course(dict(zip(stages, scores, strict=True)))
        got = (course.response, course.baseline_stage, course.worse_from, course.implausible_stages)
        assert got == _course_uncached(scores), scores


def test_score_lookup_table_follows_the_character_rules() -> None:
    # the table only shortcuts the rules: x or X is not visualised, an ASCII digit is its value
    for char, value in _SCORE_CHARS.items():
        if char.lower() == NOT_VISUALISED:
            assert value is None
        else:
            assert char.isdigit() and char.isascii() and value == int(char)
    assert set(_SCORE_CHARS) == {*"0123456789", "x", "X"}


@settings(max_examples=400, deadline=None)
@given(
    count=st.sampled_from([16, 17, 18]),
    scale=st.sampled_from([4, 5]),
    kind=st.sampled_from(["wall_motion", "perfusion"]),
    numbers=st.sets(st.integers(1, 20), max_size=20),
    complete=st.booleans(),  # every segment scored, the usual case (the shortcut's)
    fives=st.sets(st.integers(1, 20), max_size=3),
)
def test_score_set_checks_find_exactly_what_the_rules_name(
    count: int, scale: int, kind: str, numbers: set[int], complete: bool, fives: set[int]
) -> None:
    if complete:
        numbers = set(range(1, count + 1)) | {n for n in numbers if n > count and n % 2}
    # the rules, stated independently: a number beyond the model, a segment without a score,
    # and an aneurysmal 5 on the 4-point wall-motion scale are each a problem at their location
    scores = {n: 5 if n in fives else 1 for n in sorted(numbers)}
    where = ("stages", "peak", kind)
    expected = [(*where, n) for n in sorted(numbers) if n > count]
    if any(n not in numbers for n in range(1, count + 1)):
        expected.append(where)
    if kind == "wall_motion" and scale == 4:
        expected += [(*where, n) for n in sorted(numbers) if n in fives and n <= count]
    problems = _study_problems(count, scale, {"peak": {kind: scores}}, None, None, None)
    assert [p["loc"] for p in problems] == expected
