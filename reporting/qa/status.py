"""How the quality review reads a record: diagnostic, non-diagnostic, or a viability-only study.

Diagnostic accuracy against angiography only means something for a study that set out to find
inducible ischaemia and could answer. Two kinds of record are kept apart from the 2×2 tables:

- **viability-only**: a dobutamine study imaged at rest and low dose only, with no peak and no
  recovery stage. It asks whether dysfunctional myocardium is viable, not whether there is inducible
  ischaemia, so it is neither a negative test nor a failed one [common practice]. It is not counted
  in a reader's non-diagnostic rate either.
- **non-diagnostic**: the record's ``conclusion.status`` says ``non_diagnostic`` (no stress images, a
  territory not assessable, or inadequate stress without ischaemia; the rule lives in the analysis,
  this module only reads its answer). A study that shows ischaemia is diagnostic whatever its stress.

This is the one place the review and its PDF decide that; change the reading here and both follow.
:func:`non_diagnostic_rates` gives the non-diagnostic rate over every study in the period, with or
without angiography (a measure of the lab's imaging and reading, not of accuracy), overall and per
reader, each with its Wilson 95 % interval; viability-only studies are counted beside it, not in it.
"""

from __future__ import annotations

from collections.abc import Sequence

from pydantic import BaseModel, ConfigDict, Field

from reporting.model import Protocol, Stage
from reporting.qa.metrics import Proportion, proportion
from reporting.results import Analysis, DiagnosticStatus
from reporting.vocabulary import Vocabulary

# Stages that image the heart under stress for ischaemia; a study with neither stopped at low dose.
_STRESS_STAGES = frozenset({Stage.PEAK, Stage.RECOVERY})


class ReviewClass(Vocabulary):
    """Where a study goes in the quality review."""

    DIAGNOSTIC = "diagnostic"
    """Answers the question of inducible ischaemia: counted in the 2×2 tables (with angiography)."""
    NON_DIAGNOSTIC = "non_diagnostic"
    """Set out to answer it and could not: listed apart and counted in the non-diagnostic rate."""
    VIABILITY_ONLY = "viability_only"
    """A low-dose dobutamine viability study: listed apart, in neither the tables nor the rate."""


def is_viability_only(record: Analysis) -> bool:
    """A dobutamine study with low-dose images and no peak or recovery stage."""
    stages = set(record.stages)
    return (
        record.protocol is Protocol.DOBUTAMINE
        and Stage.LOW_DOSE in stages
        and not stages & _STRESS_STAGES
    )


def is_non_diagnostic(record: Analysis) -> bool:
    """The record's own answer is non-diagnostic (``conclusion.status``)."""
    return record.conclusion.status is DiagnosticStatus.NON_DIAGNOSTIC


def review_class(record: Analysis) -> ReviewClass:
    """The place of ``record`` in the review: viability-only first, then non-diagnostic."""
    if is_viability_only(record):
        return ReviewClass.VIABILITY_ONLY
    if is_non_diagnostic(record):
        return ReviewClass.NON_DIAGNOSTIC
    return ReviewClass.DIAGNOSTIC


class NonDiagnosticRate(BaseModel):
    """How often studies in the period were non-diagnostic."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    studies: int = Field(description="Studies in the period, with or without angiography.")
    viability_only: int = Field(
        description="Of these, viability-only studies (rest and low dose only): not in the rate."
    )
    non_diagnostic: Proportion = Field(
        description="Non-diagnostic studies ÷ studies that were not viability-only, with the Wilson "
        "95 % interval."
    )


class ReaderNonDiagnosticRate(NonDiagnosticRate):
    """The non-diagnostic rate of one reader."""

    reader: str | None = Field(description="Reading physician; null = reader not recorded.")


def non_diagnostic_rate(records: Sequence[Analysis]) -> NonDiagnosticRate:
    """The non-diagnostic rate of ``records`` (viability-only studies counted apart)."""
    classes = [review_class(r) for r in records]
    viability = classes.count(ReviewClass.VIABILITY_ONLY)
    return NonDiagnosticRate(
        studies=len(records),
        viability_only=viability,
        non_diagnostic=proportion(
            classes.count(ReviewClass.NON_DIAGNOSTIC), len(records) - viability
        ),
    )


def non_diagnostic_by_reader(records: Sequence[Analysis]) -> list[ReaderNonDiagnosticRate]:
    """One rate per reader: named readers alphabetically, an unrecorded reader last."""
    groups: dict[str | None, list[Analysis]] = {}
    for record in records:
        groups.setdefault(record.study.reader, []).append(record)
    order = sorted(groups, key=lambda g: (g is None, g or ""))
    return [
        ReaderNonDiagnosticRate(reader=g, **dict(non_diagnostic_rate(groups[g]))) for g in order
    ]
