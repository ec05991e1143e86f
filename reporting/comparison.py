"""Prior-study comparison: what changed since the patient's previous stress echo.

:func:`compare` is a pure function of two typed analyses, the current one and its *prior* (the
latest earlier signed study of the same patient; the report store finds it, file mode is given it).
It returns a :class:`Comparison`, the record's ``comparison`` (contract shape), and the notes that
explain what could not be compared; :func:`with_comparison` puts both into the current analysis.

**Territory categories** (common practice: a territory is compared by whether it showed inducible
ischaemia in each study and, when it did both times, by how many of its segments were ischaemic by
wall motion or by a reversible perfusion defect):

========================================  =============================================
prior territory / current territory       category
========================================  =============================================
no ischaemia / no ischaemia               ``none``
no ischaemia / ischaemia                  ``new``
ischaemia / no ischaemia                  ``resolved``
ischaemia / ischaemia, fewer segments     ``improved``
ischaemia / ischaemia, more segments      ``worsened``
ischaemia / ischaemia, as many segments   ``unchanged``
non-diagnostic in either study            not compared (left out; a note names it)
========================================  =============================================

A territory non-diagnostic in one study is never called ``new``, ``resolved`` or ``none``: the
unread study could have shown the opposite. When the two studies use different segment models the
segments do not correspond: nothing is compared by segment (no changed segments, and ischaemic
territories in both studies are left out rather than judged by counts of different segments); a
note says so. WMSI is compared per stage whatever the model (it is an index, not a count).

A **changed segment** is one whose wall-motion response differs between the studies (same segment
model only). A change to or from ``not_assessable`` is listed too, so that the list is complete, but
it is no change of the heart: the change map shows it as not compared.
"""

from __future__ import annotations

import datetime as dt
from typing import TYPE_CHECKING

from pydantic import BaseModel, ConfigDict, Field

from reporting.errors import InputError
from reporting.model import Stage
from reporting.scoring import ISCHEMIC_RESPONSES, WallMotionResponse
from reporting.segments import Territory
from reporting.vocabulary import Vocabulary

if TYPE_CHECKING:
    from reporting.results import Analysis, Note, TerritoryResult


SOURCE = "common practice"
"""Source of the comparison rules (FACTS gives no published rule for them)."""


class TerritoryChange(Vocabulary):
    """How a territory's inducible ischaemia changed since the prior study."""

    NEW = "new"
    """Ischaemia now; none in the prior study."""
    UNCHANGED = "unchanged"
    """Ischaemia in both studies, in as many segments."""
    IMPROVED = "improved"
    """Ischaemia in both studies, in fewer segments now."""
    WORSENED = "worsened"
    """Ischaemia in both studies, in more segments now."""
    RESOLVED = "resolved"
    """Ischaemia in the prior study; none now."""
    NONE = "none"
    """No ischaemia then or now."""


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class WmsiThenNow(_Model):
    """WMSI at one stage in the prior and the current study."""

    prior: float | None = Field(description="WMSI in the prior study; null when not computed.")
    current: float | None = Field(description="WMSI in this study; null when not computed.")


class SegmentChange(_Model):
    """A segment whose wall-motion response changed since the prior study."""

    number: int = Field(description="Segment number (same segment model in both studies).")
    prior_response: WallMotionResponse = Field(description="Response in the prior study.")
    response: WallMotionResponse = Field(description="Response in this study.")


class Comparison(_Model):
    """This study compared with the patient's prior study (rules: :mod:`reporting.comparison`)."""

    prior_study_id: str = Field(description="Study id of the prior study.")
    prior_date: dt.date | None = Field(
        description="Date of the prior study; null in a de-identified record."
    )
    wmsi: dict[Stage, WmsiThenNow] = Field(
        description="WMSI per stage then and now, for every stage either study computed it at."
    )
    territories: dict[Territory, TerritoryChange] = Field(
        description="Change of inducible ischaemia per territory; a territory non-diagnostic in "
        "either study (or not comparable across segment models) is left out and named in a note."
    )
    changed_segments: list[SegmentChange] = Field(
        description="Segments whose wall-motion response differs from the prior study's (a change "
        "to or from not_assessable included); empty when the segment models differ."
    )


def check_prior(current: Analysis, prior: Analysis, location: str = "prior") -> None:
    """Refuse a prior that is not an earlier study of the same patient."""
    if prior.study.id == current.study.id:
        raise InputError(location, f"is the same study ({current.study.id})")
    if current.patient.id is None or prior.patient.id is None:
        raise InputError(location, "both studies need a patient id to be compared")
    if prior.patient.id != current.patient.id:
        raise InputError(
            location,
            f"belongs to patient {prior.patient.id}, not {current.patient.id}: only studies of "
            "the same patient are compared",
        )
    if current.study.date is None or prior.study.date is None:
        raise InputError(location, "both studies need a date to be compared")
    if prior.study.date >= current.study.date:
        raise InputError(
            location,
            f"is dated {prior.study.date.isoformat()}, not before this study "
            f"({current.study.date.isoformat()})",
        )


def ischemic_count(territory: TerritoryResult) -> int:
    """Segments of a territory ischaemic by wall motion or by a reversible perfusion defect."""
    return len(territory.ischemic_segments) + len(territory.ischemic_perfusion_segments)


def territory_change(
    prior: TerritoryResult, current: TerritoryResult, *, counts_comparable: bool = True
) -> TerritoryChange | None:
    """The category of one territory (table in the module docstring); None when not compared."""
    from reporting.results import TerritoryStatus

    before, now = prior.status, current.status
    if TerritoryStatus.NON_DIAGNOSTIC in (before, now):
        return None
    was, is_ = before is TerritoryStatus.ISCHEMIA, now is TerritoryStatus.ISCHEMIA
    if not was:
        return TerritoryChange.NEW if is_ else TerritoryChange.NONE
    if not is_:
        return TerritoryChange.RESOLVED
    if not counts_comparable:
        return None
    then_count, now_count = ischemic_count(prior), ischemic_count(current)
    if now_count < then_count:
        return TerritoryChange.IMPROVED
    if now_count > then_count:
        return TerritoryChange.WORSENED
    return TerritoryChange.UNCHANGED


def compare(
    current: Analysis, prior: Analysis, *, location: str = "prior"
) -> tuple[Comparison, list[Note]]:
    """``current`` compared with ``prior`` (an earlier study of the same patient), and its notes;
    ``location`` names the prior in an error."""
    from reporting.results import Note, NoteKind

    check_prior(current, prior, location)
    same_model = current.segment_model is prior.segment_model
    notes: list[str] = []
    stages = [s for s in Stage if s in current.wmsi or s in prior.wmsi]
    wmsi = {s: WmsiThenNow(prior=prior.wmsi.get(s), current=current.wmsi.get(s)) for s in stages}

    territories: dict[Territory, TerritoryChange] = {}
    for t in Territory:
        change = territory_change(
            prior.territories[t], current.territories[t], counts_comparable=same_model
        )
        if change is not None:
            territories[t] = change
            continue
        if not same_model and _ischemic_in_both(prior, current, t):
            notes.append(
                f"{t.value}: ischaemic in both studies; its extent is not compared across "
                "different segment models."
            )
        else:
            where = _non_diagnostic_in(prior, current, t)
            notes.append(f"{t.value}: not compared (non-diagnostic in {where}).")

    changed: list[SegmentChange] = []
    if same_model:
        before = {s.number: s.response for s in prior.segments}
        for seg in current.segments:
            then = before[seg.number]
            if then is seg.response:
                continue
            changed.append(
                SegmentChange(number=seg.number, prior_response=then, response=seg.response)
            )
    if prior.territory_map.name != current.territory_map.name:
        notes.append(
            f"The studies used different territory maps ({prior.territory_map.name}, "
            f"{current.territory_map.name}); each territory is judged under its study's own map."
        )
    made = [Note(kind=NoteKind.COMPARISON, text=t, source=SOURCE) for t in notes]
    if not same_model:
        text = (
            f"The prior study used the {int(prior.segment_model)}-segment model and this one the "
            f"{int(current.segment_model)}-segment model: segments are not compared one by one."
        )
        made.insert(0, Note(kind=NoteKind.SEGMENTS_NOT_COMPARED, text=text, source=SOURCE))
    comparison = Comparison(
        prior_study_id=prior.study.id,
        prior_date=prior.study.date,
        wmsi=wmsi,
        territories=territories,
        changed_segments=changed,
    )
    return comparison, made


def _ischemic_in_both(prior: Analysis, current: Analysis, t: Territory) -> bool:
    from reporting.results import TerritoryStatus

    return (
        prior.territories[t].status is TerritoryStatus.ISCHEMIA
        and current.territories[t].status is TerritoryStatus.ISCHEMIA
    )


def _non_diagnostic_in(prior: Analysis, current: Analysis, t: Territory) -> str:
    from reporting.results import TerritoryStatus

    nd = TerritoryStatus.NON_DIAGNOSTIC
    then, now = prior.territories[t].status is nd, current.territories[t].status is nd
    if then and now:
        return "both studies"
    return "the prior study" if then else "this study"


def with_comparison(
    current: Analysis, prior: Analysis | None, *, location: str = "prior"
) -> Analysis:
    """``current`` with its ``comparison`` (and the comparison's notes); unchanged without a prior."""
    if prior is None:
        return current
    comparison, notes = compare(current, prior, location=location)
    return current.model_copy(update={"comparison": comparison, "notes": [*current.notes, *notes]})


def segments_compared(analysis: Analysis) -> bool:
    """Whether ``analysis`` has a comparison made segment by segment (same segment model)."""
    from reporting.results import NoteKind

    return analysis.comparison is not None and not any(
        n.kind is NoteKind.SEGMENTS_NOT_COMPARED for n in analysis.notes
    )


def ischemic_response(response: WallMotionResponse) -> bool:
    """Whether a wall-motion response counts as ischaemic (ischemic or biphasic)."""
    return response in ISCHEMIC_RESPONSES
