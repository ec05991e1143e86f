"""Scoring rules: wall-motion score index, segment responses, perfusion categories, extent.

Pure functions of scores; no I/O and no knowledge of files. The response rules follow the table of
Marwick TH, Heart 2003;89:113 and the ASE stress-echo guideline (Pellikka PA et al., JASE 2020);
akinesis turning dyskinetic is its own finding and never ischaemia (Elhendy A et al., Chest 1996;
Sozzi FB et al., JASE 2007).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from functools import lru_cache

from reporting.model import Stage
from reporting.vocabulary import Vocabulary

NORMAL_SCORE = 1
AKINETIC_SCORE = 3
ANEURYSMAL_SCORE = 5


class WallMotionResponse(Vocabulary):
    """How a segment's wall motion behaved from rest through stress."""

    NORMAL = "normal"
    """Normal at rest and normal (or hyperdynamic) at stress: no ischaemia."""
    ISCHEMIC = "ischemic"
    """New or worsening abnormality at stress."""
    BIPHASIC = "biphasic"
    """Abnormal at rest, better at low dose, worse again at peak: viable and ischaemic."""
    SUSTAINED_IMPROVEMENT = "sustained_improvement"
    """Abnormal at rest and better with stress, staying better: viable, no ischaemia."""
    FIXED = "fixed"
    """Abnormal at rest and unchanged with stress: scar or no inducible change."""
    AKINETIC_TO_DYSKINETIC = "akinetic_to_dyskinetic"
    """Akinetic (or worse) at rest and more dyskinetic at stress: a mechanical finding, not ischaemia."""
    ABNORMAL_AT_LOW_DOSE = "abnormal_at_low_dose"
    """Not seen at rest, already abnormal at low dose (its baseline) and not worse later: never
    called fixed, since the abnormality may be induced at low dose; flagged for review."""
    NOT_ASSESSABLE = "not_assessable"
    """No baseline (rest, else low dose) saw it, or neither peak nor recovery saw it."""


ISCHEMIC_RESPONSES = frozenset({WallMotionResponse.ISCHEMIC, WallMotionResponse.BIPHASIC})
VIABLE_RESPONSES = frozenset(
    {WallMotionResponse.BIPHASIC, WallMotionResponse.SUSTAINED_IMPROVEMENT}
)


class PerfusionResponse(Vocabulary):
    """How a segment's contrast perfusion behaved from rest to peak."""

    NORMAL = "normal"
    """Normal at rest and at peak."""
    REVERSIBLE = "reversible"
    """Normal at rest, abnormal at peak: inducible ischaemia."""
    PARTIALLY_REVERSIBLE = "partially_reversible"
    """Abnormal at rest and worse at peak: possible ischaemia beside a scar; flagged for review,
    not counted as a reversible defect."""
    FIXED = "fixed"
    """Abnormal at rest and unchanged at peak: infarct."""
    BETTER_AT_STRESS = "better_at_stress"
    """Abnormal at rest, better at peak: unusual; review for artefact at rest."""
    NOT_ASSESSABLE = "not_assessable"
    """Not scored at rest or at peak."""


ISCHEMIC_PERFUSION = frozenset({PerfusionResponse.REVERSIBLE})
"""Perfusion responses that make a study ischaemic (CONTRACT.md: normal at rest, abnormal at peak).

A defect that worsens from rest to peak is reported as partially reversible with a note for the
reader, but does not by itself call the study ischaemic."""


class IschemiaExtent(Vocabulary):
    """Extent of inducible ischaemia by segment count, wall motion and perfusion together (Kataoka 2015)."""

    NONE = "none"
    """No ischaemic segment."""
    MILD = "mild"
    """One or two ischaemic segments."""
    MODERATE_SEVERE = "moderate_severe"
    """Three or more ischaemic segments."""


def score_index(scores: Iterable[int | None]) -> tuple[float | None, int]:
    """Mean of the scored values and how many there were; ``None`` when nothing was scored.

    This is the wall-motion score index (sum of scores ÷ segments scored, not-visualised segments
    left out; Lang RM et al., JASE 2015) and, applied to perfusion scores, the perfusion score index.
    """
    scored = [s for s in scores if s is not None]
    if not scored:
        return None, 0
    return sum(scored) / len(scored), len(scored)


@dataclass(frozen=True)
class SegmentCourse:
    """How one segment's wall motion ran through the stages, and what it means."""

    response: WallMotionResponse
    baseline_stage: Stage | None
    """The first stage before peak that saw the segment (rest, else low dose); None if none did."""
    worse_from: Stage | None
    """First stage at which a new or worsening abnormality (ischemic or biphasic) was seen."""
    implausible_stages: tuple[Stage, ...]
    """Stress stages scored aneurysmal (5) when the baseline was not: a probable entry error."""


_LATER = (Stage.LOW_DOSE, Stage.PEAK, Stage.RECOVERY)


def segment_course(scores: Mapping[Stage, int | None]) -> SegmentCourse:
    """The course of one segment from its wall-motion scores per stage.

    Baseline is rest, else low dose (common practice); the stress image is peak, else recovery: a
    new or worsening abnormality seen only in recovery (post-stress) is still ischaemia (Marwick TH,
    Heart 2003;89:113, table 1: "peak/post-stress" against rest). A segment that turns aneurysmal
    only at stress is implausible (common practice): that stage's score is read as unchanged from an
    akinetic or dyskinetic baseline, and the stage is returned for a note to the reader.
    """
    return course_of(
        scores.get(Stage.REST),
        scores.get(Stage.LOW_DOSE),
        scores.get(Stage.PEAK),
        scores.get(Stage.RECOVERY),
    )


@lru_cache(maxsize=4096)
def course_of(
    rest: int | None, low: int | None, peak: int | None, recovery: int | None
) -> SegmentCourse:
    """:func:`segment_course` from the rest, low-dose, peak and recovery scores.

    Cached: the course is a pure function of these four scores, of which there are at most 6⁴
    combinations on the 5-point scale (each score 1–5 or not seen), and :class:`SegmentCourse` is
    immutable, so one result is safely shared by every segment with the same scores.
    """
    scores = {
        Stage.REST: rest,
        Stage.LOW_DOSE: low,
        Stage.PEAK: peak,
        Stage.RECOVERY: recovery,
    }
    baseline_stage = Stage.REST if rest is not None else Stage.LOW_DOSE if low is not None else None
    if baseline_stage is None or (peak is None and recovery is None):
        return SegmentCourse(WallMotionResponse.NOT_ASSESSABLE, baseline_stage, None, ())
    baseline = rest if rest is not None else low
    assert baseline is not None
    later = {s: scores.get(s) for s in _LATER if s is not baseline_stage}
    implausible = tuple(
        s for s, v in later.items() if v == ANEURYSMAL_SCORE and baseline < ANEURYSMAL_SCORE
    )
    if baseline >= AKINETIC_SCORE:
        later |= dict.fromkeys(implausible, baseline)
    low_, peak_, recovery_ = (later.get(s) for s in _LATER)
    if baseline_stage is Stage.LOW_DOSE:
        response = _from_low_dose(baseline, peak_, recovery_)
    else:
        response = wall_motion_response(baseline, low_, peak_, recovery_)
    return SegmentCourse(
        response, baseline_stage, _worse_from(response, baseline, later), implausible
    )


def _from_low_dose(baseline: int, peak: int | None, recovery: int | None) -> WallMotionResponse:
    worse = any(v is not None and v > baseline for v in (peak, recovery))
    if worse:
        return (
            WallMotionResponse.AKINETIC_TO_DYSKINETIC
            if baseline >= AKINETIC_SCORE
            else WallMotionResponse.ISCHEMIC
        )
    if baseline == NORMAL_SCORE:
        return WallMotionResponse.NORMAL
    return WallMotionResponse.ABNORMAL_AT_LOW_DOSE


def _worse_from(
    response: WallMotionResponse, baseline: int, later: Mapping[Stage, int | None]
) -> Stage | None:
    if response is WallMotionResponse.ISCHEMIC:
        return next(s for s, v in later.items() if v is not None and v > baseline)
    if response is WallMotionResponse.BIPHASIC:
        low = later.get(Stage.LOW_DOSE)
        return next(
            s
            for s in (Stage.PEAK, Stage.RECOVERY)
            if (v := later.get(s)) is not None and low is not None and v > low
        )
    return None


def wall_motion_response(
    rest: int | None, low_dose: int | None, peak: int | None, recovery: int | None = None
) -> WallMotionResponse:
    """The response of one segment seen at rest (Marwick 2003, table 1).

    ``low_dose`` is ``None`` when the stage was not imaged or the segment not seen there. Peak is
    judged against rest; without a peak view the recovery (post-stress) view takes its place, and a
    new or worsening abnormality first seen in recovery is ischaemia.
    """
    if rest is None or (peak is None and recovery is None):
        return WallMotionResponse.NOT_ASSESSABLE
    stress_view = peak if peak is not None else recovery
    assert stress_view is not None  # one of the two is seen (checked above)
    response = _rest_response(rest, low_dose, stress_view)
    if (
        peak is not None
        and recovery is not None
        and recovery > rest
        and response
        in (
            WallMotionResponse.NORMAL,
            WallMotionResponse.FIXED,
            WallMotionResponse.SUSTAINED_IMPROVEMENT,
        )
    ):
        return (
            WallMotionResponse.AKINETIC_TO_DYSKINETIC
            if rest >= AKINETIC_SCORE
            else WallMotionResponse.ISCHEMIC
        )
    return response


def _rest_response(rest: int, low_dose: int | None, peak: int) -> WallMotionResponse:
    if rest == NORMAL_SCORE:
        stress_scores = [s for s in (low_dose, peak) if s is not None]
        return (
            WallMotionResponse.ISCHEMIC if max(stress_scores) > rest else WallMotionResponse.NORMAL
        )
    if low_dose is not None and low_dose < rest:
        if peak <= low_dose:
            return WallMotionResponse.SUSTAINED_IMPROVEMENT
        if low_dose >= AKINETIC_SCORE:
            # Still akinetic at low dose and bulging again at peak: not ischaemia (Elhendy 1996).
            return WallMotionResponse.AKINETIC_TO_DYSKINETIC
        return WallMotionResponse.BIPHASIC
    worse_at_stress = peak > rest or (low_dose is not None and low_dose > rest)
    if worse_at_stress and rest >= AKINETIC_SCORE:
        # An akinetic (or dyskinetic) wall bulging more at stress is not ischaemia (Elhendy 1996).
        return WallMotionResponse.AKINETIC_TO_DYSKINETIC
    if worse_at_stress:
        return WallMotionResponse.ISCHEMIC
    if peak < rest:
        return WallMotionResponse.SUSTAINED_IMPROVEMENT
    return WallMotionResponse.FIXED


def perfusion_response(rest: int | None, peak: int | None) -> PerfusionResponse:
    """The perfusion category of one segment from its rest and peak visual scores."""
    if rest is None or peak is None:
        return PerfusionResponse.NOT_ASSESSABLE
    if rest == NORMAL_SCORE:
        return PerfusionResponse.REVERSIBLE if peak > rest else PerfusionResponse.NORMAL
    if peak > rest:
        return PerfusionResponse.PARTIALLY_REVERSIBLE
    if peak < rest:
        return PerfusionResponse.BETTER_AT_STRESS
    return PerfusionResponse.FIXED


def defect_extent_percent(scores: Iterable[int | None]) -> float | None:
    """Segments with a defect (score ≥ 2) as a percentage of the segments scored."""
    scored = [s for s in scores if s is not None]
    if not scored:
        return None
    return 100.0 * sum(1 for s in scored if s > NORMAL_SCORE) / len(scored)


def ischemia_extent(ischemic_segments: int, moderate_from: int) -> IschemiaExtent:
    """None, mild (1 to ``moderate_from`` − 1) or moderate–severe (≥ ``moderate_from``)."""
    if ischemic_segments == 0:
        return IschemiaExtent.NONE
    return (
        IschemiaExtent.MODERATE_SEVERE
        if ischemic_segments >= moderate_from
        else IschemiaExtent.MILD
    )


def newly_abnormal(rest: Mapping[int, int | None], stage: Mapping[int, int | None]) -> list[int]:
    """Segments worse at ``stage`` than at rest, leaving out akinesis turning dyskinetic."""
    return sorted(
        n
        for n, score in stage.items()
        if score is not None
        and rest.get(n) is not None
        and score > (r := rest[n] or 0)
        and r < AKINETIC_SCORE
    )


def connected_groups(
    members: Iterable[int], touching: Mapping[int, frozenset[int]]
) -> list[list[int]]:
    """Groups of ``members`` that touch each other (connected components), largest first."""
    remaining = set(members)
    groups: list[list[int]] = []
    while remaining:
        stack = [remaining.pop()]
        group = set(stack)
        while stack:
            for other in touching[stack.pop()] & remaining:
                remaining.discard(other)
                group.add(other)
                stack.append(other)
        groups.append(sorted(group))
    return sorted(groups, key=lambda g: (-len(g), g))
