"""The lab quality review: stress-echo conclusions against angiography, per patient and territory.

A study is echo-positive when its record concludes ischaemia, and positive for a territory when that
territory is among ``conclusion.ischemic_territories``. A patient is angiography-positive when any
vessel reaches the stenosis threshold; a territory when its own vessel or the left main does. Studies
outside the period, studies without angiography, viability-only studies and non-diagnostic studies
(both read in :mod:`reporting.qa.status`) are left out of the 2×2 tables but counted and listed, so
every record in the input is accounted for: ``records = outside_period + without_angiography +
viability_only + non_diagnostic + analysed``. The non-diagnostic rate, overall and per reader, is
taken over every study in the period, with or without angiography.
Statistics follow the IAC Adult Echocardiography Standards (2021) list of usual measures.
"""

from __future__ import annotations

import datetime as dt
import json
import logging
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import TypeVar

from pydantic import BaseModel, ConfigDict, Field

from reporting.errors import InputError, InputErrors, problems_of
from reporting.model import Protocol
from reporting.qa.angio import VESSELS_OF_TERRITORY, Angiography, Vessel, read_angiography
from reporting.qa.metrics import DiagnosticAccuracy, accuracy_of
from reporting.qa.records import read_records
from reporting.qa.status import (
    NonDiagnosticRate,
    ReaderNonDiagnosticRate,
    ReviewClass,
    non_diagnostic_by_reader,
    non_diagnostic_rate,
    review_class,
)
from reporting.results import Analysis, DiagnosticStatus
from reporting.segments import Territory
from reporting.vocabulary import Vocabulary

log = logging.getLogger(__name__)
_T = TypeVar("_T")

REVIEW_SCHEMA_VERSION = 1

DEFAULT_STENOSIS_PERCENT = 70.0
"""Diameter stenosis (%) that makes a vessel significant. IAC Adult Echocardiography Standards 2021
name both ≥ 50 % and ≥ 70 % as usual reference thresholds; 70 % is the default, a lab may choose 50."""

SOURCES = (
    "IAC Standards and Guidelines for Adult Echocardiography Accreditation, 2021 (quality review).",
    "Altman DG, Bland JM. Diagnostic tests 1: sensitivity and specificity. BMJ 1994;308:1552.",
    "Altman DG, Bland JM. Diagnostic tests 2: predictive values. BMJ 1994;309:102.",
    "Wilson EB. J Am Stat Assoc 1927;22:209–212; Newcombe RG. Stat Med 1998;17:857–872 (intervals).",
)

CAUTIONS = (
    "Only studies followed by angiography are counted, so the figures carry referral (verification) "
    "bias: sensitivity tends to be overstated and specificity understated (Begg CB, Greenes RA. "
    "Biometrics 1983;39:207–215).",
    "Angiographic stenosis is an anatomical reference; a stress echo detects inducible ischaemia, so "
    "some discordance is expected and calls for case review, not blame.",
    "Small counts give wide intervals: read the 95 % intervals before the point values.",
    "Decision support for qualified clinicians: computed values need physician review.",
)


class _Result(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class Outcome(Vocabulary):
    """Place of one study (or one territory of a study) in the 2×2 table."""

    TRUE_POSITIVE = "true_positive"
    """Echo positive, angiography positive."""
    FALSE_POSITIVE = "false_positive"
    """Echo positive, angiography negative."""
    FALSE_NEGATIVE = "false_negative"
    """Echo negative, angiography positive."""
    TRUE_NEGATIVE = "true_negative"
    """Echo negative, angiography negative."""


DISCORDANT = frozenset({Outcome.FALSE_POSITIVE, Outcome.FALSE_NEGATIVE})


def outcome_of(echo_positive: bool, reference_positive: bool) -> Outcome:
    """The 2×2 cell of one comparison."""
    if echo_positive:
        return Outcome.TRUE_POSITIVE if reference_positive else Outcome.FALSE_POSITIVE
    return Outcome.FALSE_NEGATIVE if reference_positive else Outcome.TRUE_NEGATIVE


class Period(_Result):
    """The period the review covers."""

    date_from: dt.date | None = Field(
        description="First study date asked for (inclusive); null = open."
    )
    date_to: dt.date | None = Field(
        description="Last study date asked for (inclusive); null = open."
    )
    first_study_date: dt.date | None = Field(description="Earliest date of a study in the period.")
    last_study_date: dt.date | None = Field(description="Latest date of a study in the period.")


class StudyCounts(_Result):
    """Where every record went.

    records = outside_period + without_angiography + viability_only + non_diagnostic + analysed.
    """

    records: int = Field(description="Records read.")
    outside_period: int = Field(
        description="Records dated outside the period (a de-identified record, which keeps only its "
        "year, counts as inside only when its whole year is)."
    )
    without_angiography: int = Field(description="Studies in the period with no angiography row.")
    viability_only: int = Field(
        description="Studies with angiography that are viability-only (rest and low dose only)."
    )
    non_diagnostic: int = Field(
        description="Other studies with angiography whose conclusion is non-diagnostic."
    )
    analysed: int = Field(description="Studies in the 2×2 tables.")


class StudyReference(_Result):
    """Which study a listed entry is: id, date, reader and protocol."""

    study_id: str = Field(description="Study id.")
    date: dt.date | None = Field(description="Study date; null in a de-identified record.")
    year: int = Field(description="Year of the study.")
    reader: str | None = Field(description="Reading physician.")
    protocol: Protocol = Field(description="Kind of stress.")


class ExcludedStudy(StudyReference):
    """A study in the period left out of the 2×2 tables, and why it matters for review."""

    status: DiagnosticStatus = Field(description="The record's diagnostic status.")
    significant_vessels: list[Vessel] | None = Field(
        description="Vessels at or above the threshold; null when there is no angiography."
    )


class TerritoryComparison(_Result):
    """One territory of a discordant study."""

    territory: Territory = Field(description="Coronary territory.")
    echo_positive: bool = Field(
        description="The territory is among the record's ischaemic territories."
    )
    stenosis_percent: float = Field(
        description="Largest stenosis (%) feeding the territory, the left main included for LAD and LCx."
    )
    outcome: Outcome = Field(description="2×2 cell of this territory.")


class DiscordantStudy(StudyReference):
    """A study where echo and angiography disagree, per patient or in at least one territory."""

    echo_ischemia: bool = Field(description="The record concludes ischaemia.")
    echo_territories: list[Territory] = Field(description="Ischaemic territories of the record.")
    stenosis_percent: dict[Vessel, float] = Field(
        description="Largest stenosis (%) per vessel with an angiography row."
    )
    patient_outcome: Outcome = Field(description="2×2 cell per patient.")
    discordant_territories: list[TerritoryComparison] = Field(
        description="Territories that are false positive or false negative."
    )


class GroupAccuracy(_Result):
    """Per-patient accuracy within one reader or one protocol."""

    group: str | None = Field(description="Reader name or protocol; null = reader not recorded.")
    studies: int = Field(description="Studies of the group in the 2×2 table.")
    per_patient: DiagnosticAccuracy = Field(description="Per-patient 2×2 table and measures.")


class QualityReview(_Result):
    """A lab's stress-echo results against angiography over a period."""

    schema_version: int = Field(description="Version of the quality-review format.")
    generator: str = Field(description="Program and version that computed the review.")
    labs: list[str] = Field(description="Lab names found in the analysed records.")
    period: Period = Field(description="Period covered.")
    stenosis_percent: float = Field(
        description="Diameter stenosis (%) at or above which a vessel is significant."
    )
    left_main_stenosis_percent: float = Field(
        description="Threshold (%) applied to the left main stem."
    )
    counts: StudyCounts = Field(description="Where every record went.")
    per_patient: DiagnosticAccuracy = Field(
        description="Echo ischaemia against any significant vessel."
    )
    per_territory: dict[Territory, DiagnosticAccuracy] = Field(
        description="Per territory: echo ischaemia in the territory against its vessel (and the left main)."
    )
    by_reader: list[GroupAccuracy] = Field(description="Per-patient accuracy by reader.")
    by_protocol: list[GroupAccuracy] = Field(description="Per-patient accuracy by protocol.")
    discordant: list[DiscordantStudy] = Field(description="Studies for case review.")
    without_angiography: list[ExcludedStudy] = Field(
        description="Studies in the period with no angiography row."
    )
    viability_only: list[ExcludedStudy] = Field(
        description="Viability-only studies with angiography (not tests for ischaemia)."
    )
    non_diagnostic: list[ExcludedStudy] = Field(
        description="Other studies with angiography but a non-diagnostic conclusion."
    )
    non_diagnostic_rate: NonDiagnosticRate = Field(
        description="Non-diagnostic studies among all studies in the period, angiography or not."
    )
    non_diagnostic_by_reader: list[ReaderNonDiagnosticRate] = Field(
        description="The non-diagnostic rate of each reader over the period."
    )
    angiography_without_record: list[str] = Field(
        description="Study ids of the angiography file with no record at all."
    )
    sources: list[str] = Field(description="Published sources of the method.")
    cautions: list[str] = Field(description="Cautions that accompany every review.")


def run_review(
    records_path: Path | str,
    angio_path: Path | str,
    *,
    stenosis_percent: float = DEFAULT_STENOSIS_PERCENT,
    left_main_stenosis_percent: float | None = None,
    date_from: dt.date | None = None,
    date_to: dt.date | None = None,
) -> QualityReview:
    """Read the records and the angiography file and build the review.

    Problems in both inputs are reported together as :class:`InputErrors`.
    """
    problems: list[InputError] = []
    records = _collect(lambda: read_records(records_path), problems)
    angiography = _collect(lambda: read_angiography(angio_path), problems)
    if records is None or angiography is None:
        raise InputErrors(problems)
    return build_review(
        records,
        angiography,
        stenosis_percent=stenosis_percent,
        left_main_stenosis_percent=left_main_stenosis_percent,
        date_from=date_from,
        date_to=date_to,
    )


def build_review(
    records: Sequence[Analysis],
    angiography: Mapping[str, Angiography],
    *,
    stenosis_percent: float = DEFAULT_STENOSIS_PERCENT,
    left_main_stenosis_percent: float | None = None,
    date_from: dt.date | None = None,
    date_to: dt.date | None = None,
) -> QualityReview:
    """The review of ``records`` against ``angiography`` (study id → angiography)."""
    lm_percent = (
        stenosis_percent if left_main_stenosis_percent is None else left_main_stenosis_percent
    )
    _check_threshold("stenosis_percent", stenosis_percent)
    _check_threshold("left_main_stenosis_percent", lm_percent)
    if date_from is not None and date_to is not None and date_from > date_to:
        raise InputError("period", f"from {date_from} is after to {date_to}")

    def significant(angio: Angiography, vessel: Vessel) -> bool:
        limit = lm_percent if vessel is Vessel.LM else stenosis_percent
        return angio.vessel_stenosis(vessel) >= limit

    def territory_positive(angio: Angiography, territory: Territory) -> bool:
        return any(significant(angio, v) for v in VESSELS_OF_TERRITORY[territory])

    ordered = sorted(records, key=study_order)
    in_period = [r for r in ordered if _within(r, date_from, date_to)]
    without: list[ExcludedStudy] = []
    set_apart: dict[ReviewClass, list[ExcludedStudy]] = {
        ReviewClass.VIABILITY_ONLY: [],
        ReviewClass.NON_DIAGNOSTIC: [],
    }
    analysed: list[tuple[Analysis, Angiography]] = []
    for record in in_period:
        angio = angiography.get(record.study.id)
        place = review_class(record)
        if angio is None:
            without.append(_excluded(record, None))
        elif place is ReviewClass.DIAGNOSTIC:
            analysed.append((record, angio))
        else:
            set_apart[place].append(_excluded(record, [v for v in Vessel if significant(angio, v)]))
    viability_only = set_apart[ReviewClass.VIABILITY_ONLY]
    non_diagnostic = set_apart[ReviewClass.NON_DIAGNOSTIC]

    def patient_pairs(rows: Sequence[tuple[Analysis, Angiography]]) -> list[tuple[bool, bool]]:
        return [(r.conclusion.ischemia, any(significant(a, v) for v in Vessel)) for r, a in rows]

    per_territory = {
        t: accuracy_of(
            [
                (t in r.conclusion.ischemic_territories, territory_positive(a, t))
                for r, a in analysed
            ]
        )
        for t in Territory
    }
    discordant: list[DiscordantStudy] = []
    for record, angio in analysed:
        patient = outcome_of(record.conclusion.ischemia, any(significant(angio, v) for v in Vessel))
        territories = [
            TerritoryComparison(
                territory=t,
                echo_positive=t in record.conclusion.ischemic_territories,
                stenosis_percent=angio.territory_stenosis(t),
                outcome=outcome_of(
                    t in record.conclusion.ischemic_territories, territory_positive(angio, t)
                ),
            )
            for t in Territory
        ]
        wrong = [c for c in territories if c.outcome in DISCORDANT]
        if patient in DISCORDANT or wrong:
            discordant.append(
                DiscordantStudy(
                    study_id=record.study.id,
                    date=record.study.date,
                    year=record.study.year,
                    reader=record.study.reader,
                    protocol=record.protocol,
                    echo_ischemia=record.conclusion.ischemia,
                    echo_territories=list(record.conclusion.ischemic_territories),
                    stenosis_percent=dict(angio.stenosis_percent),
                    patient_outcome=patient,
                    discordant_territories=wrong,
                )
            )

    known_ids = {r.study.id for r in records}
    dates = [r.study.date for r in in_period if r.study.date is not None]
    review = QualityReview(
        schema_version=REVIEW_SCHEMA_VERSION,
        generator=f"segreport {_version()}",
        labs=sorted({r.study.lab for r, _ in analysed if r.study.lab}),
        period=Period(
            date_from=date_from,
            date_to=date_to,
            first_study_date=min(dates, default=None),
            last_study_date=max(dates, default=None),
        ),
        stenosis_percent=stenosis_percent,
        left_main_stenosis_percent=lm_percent,
        counts=StudyCounts(
            records=len(records),
            outside_period=len(records) - len(in_period),
            without_angiography=len(without),
            viability_only=len(viability_only),
            non_diagnostic=len(non_diagnostic),
            analysed=len(analysed),
        ),
        per_patient=accuracy_of(patient_pairs(analysed)),
        per_territory=per_territory,
        by_reader=_groups(analysed, lambda r: r.study.reader, patient_pairs),
        by_protocol=_groups(analysed, lambda r: r.protocol.value, patient_pairs),
        discordant=discordant,
        without_angiography=without,
        viability_only=viability_only,
        non_diagnostic=non_diagnostic,
        non_diagnostic_rate=non_diagnostic_rate(in_period),
        non_diagnostic_by_reader=non_diagnostic_by_reader(in_period),
        angiography_without_record=sorted(set(angiography) - known_ids),
        sources=list(SOURCES),
        cautions=list(CAUTIONS),
    )
    log.info(
        "quality review: %d records, %d analysed, %d discordant",
        len(records),
        len(analysed),
        len(discordant),
    )
    return review


def review_json(review: QualityReview) -> str:
    """The review as indented JSON text ending in a newline (stable key order)."""
    return json.dumps(review.model_dump(mode="json"), indent=2, ensure_ascii=False) + "\n"


def _groups(
    analysed: Sequence[tuple[Analysis, Angiography]],
    key: Callable[[Analysis], str | None],
    pairs: Callable[[Sequence[tuple[Analysis, Angiography]]], list[tuple[bool, bool]]],
) -> list[GroupAccuracy]:
    groups: dict[str | None, list[tuple[Analysis, Angiography]]] = {}
    for row in analysed:
        groups.setdefault(key(row[0]), []).append(row)
    # Named groups alphabetically, an unrecorded reader last.
    order = sorted(groups, key=lambda g: (g is None, g or ""))
    return [
        GroupAccuracy(group=g, studies=len(groups[g]), per_patient=accuracy_of(pairs(groups[g])))
        for g in order
    ]


def _excluded(record: Analysis, vessels: list[Vessel] | None) -> ExcludedStudy:
    return ExcludedStudy(
        study_id=record.study.id,
        date=record.study.date,
        year=record.study.year,
        reader=record.study.reader,
        protocol=record.protocol,
        status=record.conclusion.status,
        significant_vessels=vessels,
    )


def study_order(record: Analysis) -> tuple[dt.date, str]:
    """Sort key: study date (1 January of the year when de-identified), then study id."""
    return (record.study.date or dt.date(record.study.year, 1, 1), record.study.id)


def _within(record: Analysis, start: dt.date | None, end: dt.date | None) -> bool:
    # A de-identified record keeps only its year: it is inside only when its whole year is.
    first = record.study.date or dt.date(record.study.year, 1, 1)
    last = record.study.date or dt.date(record.study.year, 12, 31)
    return (start is None or first >= start) and (end is None or last <= end)


def _check_threshold(name: str, value: float) -> None:
    if not 0 < value <= 100:
        raise InputError(
            name, f"{value:g} is not a stenosis threshold (use a percentage above 0, up to 100)"
        )


def _collect(read: Callable[[], _T], problems: list[InputError]) -> _T | None:
    try:
        return read()
    except (InputError, InputErrors) as exc:
        problems += [p for p in problems_of(exc) if isinstance(p, InputError)]
    return None


def _version() -> str:
    from reporting import __version__

    return __version__
