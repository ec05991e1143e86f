"""Kinds of note the analysis leaves for the reader, and which of them the referrer may see.

Notes are written for the reading physician: image-review prompts, entry-error warnings, protocol
remarks. They stay in the record and on the entry page; the referring-doctor PDF prints a note only
when the reader keeps its kind (the study's ``kept_notes``). A few kinds are findings the referrer
needs (:data:`REFERRER_NOTES`): those are always printed.

This module imports nothing from the package, so the study model can name note kinds.
"""

from __future__ import annotations

from reporting.vocabulary import Vocabulary


class NoteKind(Vocabulary):
    """Kind of image-quality or protocol note."""

    SUGGEST_CONTRAST = "suggest_contrast"
    """Contiguous segments not visualised without an enhancing agent."""
    HIGH_MI_PERFUSION = "high_mi_perfusion"
    """Perfusion imaging above the low-MI range."""
    BOLUS_QUANTIFICATION = "bolus_quantification"
    """Quantitative curves acquired with bolus rather than infusion."""
    PERFUSION_WITHOUT_CONTRAST = "perfusion_without_contrast"
    """Perfusion scores entered but no enhancing agent recorded."""
    NOT_VISUALISED = "not_visualised"
    """Segments not visualised at a stage."""
    DUKE_NOT_APPLICABLE = "duke_not_applicable"
    """Exercise data given for a protocol on which the Duke score is not validated."""
    AGE_UNKNOWN = "age_unknown"
    """No age, so heart-rate targets cannot be computed."""
    WORSENING_DEFECT = "worsening_defect"
    """A perfusion defect present at rest that worsens at peak."""
    VIABILITY = "viability"
    """Enough biphasic segments to predict recovery of global function."""
    ABNORMAL_AT_LOW_DOSE = "abnormal_at_low_dose"
    """Segments not seen at rest and already abnormal at low dose: not called fixed; review."""
    PROBABLE_ENTRY_ERROR = "probable_entry_error"
    """An implausible entry (a segment aneurysmal only at stress, a dose in an exercise study)."""
    LV_DILATION = "lv_dilation"
    """End-systolic volume rose with stress within the lab's allowance (or the lab does not grade
    it): an abnormal response, not graded high risk."""
    BLOOD_PRESSURE_FALL = "blood_pressure_fall"
    """Systolic pressure fell under pharmacological stress: reported, not graded high risk."""
    FIT_QUALITY = "fit_quality"
    """Replenishment-curve fit quality and visual cross-checks (kept or not as one kind)."""
    COMPARISON = "comparison"
    """What the prior-study comparison could not compare (territories, maps)."""
    SEGMENTS_NOT_COMPARED = "segments_not_compared"
    """The prior study used another segment model: no comparison segment by segment."""


REFERRER_NOTES = frozenset(
    {
        NoteKind.VIABILITY,
        NoteKind.LV_DILATION,
        NoteKind.BLOOD_PRESSURE_FALL,
        NoteKind.WORSENING_DEFECT,
        NoteKind.COMPARISON,
        NoteKind.SEGMENTS_NOT_COMPARED,
    }
)
"""Notes that state a finding rather than ask the reader to check something: always printed."""
