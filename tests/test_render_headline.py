"""The headline answers the referral question, and the wording rules of issue 13 item 6.

The numbers in each demo headline are checked against a small independent computation from the raw
score strings of the study file (not from the Analysis): a segment is ischaemic when stress makes it
worse than rest, or it is biphasic (abnormal at rest, better at low dose, worse again at peak), except
akinesis turning dyskinetic (Marwick TH, Heart 2003;89:113, table 1; Elhendy A et al., Chest 1996),
or when its perfusion is normal at rest and reduced at peak (Porter TR et al., JASE 2018). Extent:
1–2 segments limited, ≥ 3 extensive (Kataoka A et al., Cardiovasc Ultrasound 2015;13:47). Viable:
abnormal at rest and better at low dose (Marwick 2003, table 1).
"""

from __future__ import annotations

import re
from typing import Any

import pytest
import yaml

from reporting.analysis import analyze
from reporting.demo import demo_study_names, demo_study_text
from reporting.load import study_from_data
from reporting.render.narrative import narrative_text, summary
from reporting.render.narrative.words import segments_phrase

NAMES = [n.removesuffix(".yaml") for n in demo_study_names()]


def _data(name: str) -> dict[str, Any]:
    data: dict[str, Any] = yaml.safe_load(demo_study_text(f"{name}.yaml"))
    return data


def _scores(data: dict[str, Any], stage: str, kind: str) -> list[int | None]:
    text = str(data["stages"].get(stage, {}).get(kind) or "").replace(" ", "")
    return [None if c == "x" else int(c) for c in text]


def _ischaemic(data: dict[str, Any]) -> set[int]:
    rest = _scores(data, "rest", "wall_motion")
    low = _scores(data, "low_dose", "wall_motion")
    out: set[int] = set()
    for stage in ("peak", "recovery"):
        for i, score in enumerate(_scores(data, stage, "wall_motion")):
            base = rest[i]
            if score is None or base is None:
                continue
            if score > base and not (base == 3 and score == 4):
                out.add(i + 1)
            if low and low[i] is not None and base > 1 and low[i] < base and score > low[i]:
                out.add(i + 1)  # biphasic
    rest_p = _scores(data, "rest", "perfusion")
    for i, score in enumerate(_scores(data, "peak", "perfusion")):
        if rest_p and rest_p[i] == 1 and score is not None and score >= 2:
            out.add(i + 1)
    return out


@pytest.mark.parametrize("name", NAMES)
def test_headline_numbers_agree_with_an_independent_count(name: str) -> None:
    data = _data(name)
    headline = summary(analyze(study_from_data(data)))
    found = _ischaemic(data)
    if not found:
        assert "Positive for inducible ischaemia" not in headline
        return
    match = re.search(r"(limited|extensive) ischaemia[^:]*: (\d+) segments?\b", headline)
    assert match is not None, headline
    assert int(match.group(2)) == len(found)
    assert match.group(1) == ("extensive" if len(found) >= 3 else "limited")


def test_viability_answer_counts_viable_segments_independently() -> None:
    data = _data("DEMO-0003")  # indication asks about viability
    rest = _scores(data, "rest", "wall_motion")
    low = _scores(data, "low_dose", "wall_motion")
    abnormal = [i for i, s in enumerate(rest) if s is not None and s > 1]
    viable = [i for i in abnormal if low[i] is not None and low[i] < rest[i]]  # type: ignore[operator]
    headline = summary(analyze(study_from_data(data)))
    assert headline.startswith(
        f"Viability: {len(viable)} of {len(abnormal)} segments abnormal at rest are viable"
    )
    assert "not certain" in headline  # cautious: a prediction, never a promise
    assert headline.index("Viability") < headline.index("Positive for inducible ischaemia")


def test_viability_question_comes_from_the_referral_question_first() -> None:
    data = _data("DEMO-0003") | {"referral_question": "Inducible ischaemia before surgery?"}
    assert summary(analyze(study_from_data(data))).startswith("Positive for inducible ischaemia")
    data = _data("DEMO-0002") | {"referral_question": "Is the anterior wall viable?"}
    # no segment abnormal at rest: nothing to call viable or not
    assert summary(analyze(study_from_data(data))).startswith(
        "Viability: no segment was abnormal at rest"
    )


def test_risk_band_is_stated_with_its_criteria() -> None:
    analysis = analyze(study_from_data(_data("DEMO-0004")))
    assert summary(analysis).endswith(
        "Intermediate risk: limited inducible ischaemia and intermediate-risk Duke treadmill score."
    )


@pytest.mark.parametrize(
    ("numbers", "expected"),
    [([4], "segment 4"), ([4, 10], "segments 4 and 10"), ([1, 2, 3], "segments 1, 2 and 3")],
    ids=["one", "two", "three"],
)
def test_number_agreement(numbers: list[int], expected: str) -> None:
    assert segments_phrase(numbers) == expected


def test_one_ischaemic_segment_reads_in_the_singular() -> None:
    data = _data("DEMO-0001")
    data["stages"]["peak"]["wall_motion"] = "111211 111111 1111 1"  # segment 4 only
    data["stages"]["recovery"]["wall_motion"] = "1" * 17
    analysis = analyze(study_from_data(data))
    assert "limited ischaemia: 1 segment." in summary(analysis)
    text = narrative_text(analysis)
    assert "Segment 4 is often supplied by another artery (LCx)" in text
    assert "segments 4 is" not in text.lower()


@pytest.mark.parametrize(
    ("name", "shared"), [("DEMO-0001", False), ("DEMO-0002", True)], ids=["normal", "apex"]
)
def test_shared_supply_sentence_only_when_it_matters(name: str, shared: bool) -> None:
    # DEMO-0001 has no ischaemia: which artery supplies a normal segment changes nothing
    text = narrative_text(analyze(study_from_data(_data(name))))
    assert ("often supplied by another artery" in text) is shared


@pytest.mark.parametrize("name", NAMES)
def test_extent_is_never_worded_as_severity(name: str) -> None:
    text = narrative_text(analyze(study_from_data(_data(name))))
    assert "moderate–severe" not in text and "mild extent" not in text


def test_half_entered_draft_says_not_scored_yet_never_not_visualised() -> None:
    data = _data("DEMO-0002")
    del data["stages"]["low_dose"]["wall_motion"]  # stage not yet scored
    data["stages"]["peak"]["wall_motion"] = "x" * 17  # the entry page's empty grid
    for stage in data["stages"].values():
        stage.pop("perfusion", None)
        stage.pop("lv_esv_ml", None)  # volumes not measured yet either
    data.pop("contrast", None)
    analysis = analyze(study_from_data(data))
    text = narrative_text(analysis)
    assert summary(analysis) == (
        "Non-diagnostic for ischaemia: no ischaemia was shown, but low dose and peak are not "
        "scored yet."
    )
    assert "not visualised" not in text.lower()
    assert "Low dose (dobutamine 10 μg/kg/min): wall motion not scored yet." in text
