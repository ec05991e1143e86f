"""Agreement between two readers who scored the same studies.

Records of reader A and reader B are matched by study id; ids found on one side only are reported,
not ignored. For wall motion, every segment scored by both readers at a stage is one pair, and the
pairs of all matched studies are pooled per stage into linear and quadratic weighted kappa over the
full score scale (1–4, or 1–5 when a record uses the 5-point scale). Ischaemia yes/no is compared per
patient (``conclusion.ischemia``) and per territory (territory among ``ischemic_territories``) with
unweighted kappa. Each kappa carries its Landis & Koch band; published multicentre kappas for
stress echo lie around 0.37–0.64 (Hoffmann R et al., *J Am Coll Cardiol* 1996;27:330), a yardstick
for a lab's own figures.
"""

from __future__ import annotations

import json
import logging
from collections.abc import Sequence
from pathlib import Path

from pydantic import BaseModel, ConfigDict, Field

from reporting.errors import InputError, InputErrors, problems_of
from reporting.model import Stage
from reporting.qa.kappa import (
    AgreementLabel,
    Weighting,
    cohen_kappa,
    landis_koch,
    proportion_agreeing,
)
from reporting.qa.records import read_records
from reporting.results import Analysis, DiagnosticStatus
from reporting.segments import Territory

log = logging.getLogger(__name__)

AGREEMENT_SCHEMA_VERSION = 1

SOURCES = (
    "Cohen J. Educ Psychol Meas 1960;20:37–46 (kappa).",
    "Cohen J. Psychol Bull 1968;70:213–220 (weighted kappa).",
    "Fleiss JL, Cohen J. Educ Psychol Meas 1973;33:613–619 (quadratic weights).",
    "Landis JR, Koch GG. Biometrics 1977;33:159–174 (descriptive bands).",
    "Hoffmann R et al. J Am Coll Cardiol 1996;27:330–336 (multicentre stress-echo agreement).",
)

CAUTIONS = (
    "Kappa depends on how common each score is: with almost all segments normal, kappa can be low "
    "while percent agreement is high. Read both.",
    "Segments of one study are not independent; pooled segment kappa describes the lab, not a "
    "single study.",
)


class _Result(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class KappaStatistic(_Result):
    """A kappa and its Landis & Koch band."""

    value: float | None = Field(
        description="Kappa; null when undefined (no pairs or no variation)."
    )
    label: AgreementLabel | None = Field(description="Landis & Koch band; null with the value.")


class OrdinalAgreement(_Result):
    """Segment-level agreement on wall-motion scores at one stage."""

    studies: int = Field(description="Matched studies that contributed pairs at this stage.")
    pairs: int = Field(description="Segments scored by both readers at this stage.")
    scale_max: int = Field(description="Highest score of the scale the kappa used (4 or 5).")
    percent_agreement: float | None = Field(description="Pairs with the same score (%).")
    percent_within_one_grade: float | None = Field(
        description="Pairs whose scores differ by at most one grade (%)."
    )
    unweighted: KappaStatistic = Field(description="Unweighted kappa (Cohen 1960).")
    linear: KappaStatistic = Field(description="Linear-weighted kappa (Cohen 1968).")
    quadratic: KappaStatistic = Field(description="Quadratic-weighted kappa (Fleiss & Cohen 1973).")


class BinaryAgreement(_Result):
    """Agreement on ischaemia yes/no."""

    pairs: int = Field(description="Comparisons (studies, or study × territory).")
    both_positive: int = Field(description="Both readers say ischaemia.")
    both_negative: int = Field(description="Neither reader says ischaemia.")
    positive_a_only: int = Field(description="Reader A only says ischaemia.")
    positive_b_only: int = Field(description="Reader B only says ischaemia.")
    percent_agreement: float | None = Field(description="Comparisons where the readers agree (%).")
    kappa: KappaStatistic = Field(description="Unweighted kappa (Cohen 1960).")


class ConclusionDisagreement(_Result):
    """A study whose two readings reach different conclusions."""

    study_id: str = Field(description="Study id.")
    reader_a: str | None = Field(description="Reader A's name in the record.")
    reader_b: str | None = Field(description="Reader B's name in the record.")
    status_a: DiagnosticStatus = Field(description="Reader A's diagnostic status.")
    status_b: DiagnosticStatus = Field(description="Reader B's diagnostic status.")
    territories_a: list[Territory] = Field(description="Reader A's ischaemic territories.")
    territories_b: list[Territory] = Field(description="Reader B's ischaemic territories.")


class Agreement(_Result):
    """Agreement between two readings of the same studies."""

    schema_version: int = Field(description="Version of the agreement format.")
    generator: str = Field(description="Program and version that computed it.")
    readers_a: list[str] = Field(description="Reader names found in set A.")
    readers_b: list[str] = Field(description="Reader names found in set B.")
    matched_studies: int = Field(description="Study ids present in both sets.")
    only_in_a: list[str] = Field(description="Study ids read in set A only (not compared).")
    only_in_b: list[str] = Field(description="Study ids read in set B only (not compared).")
    segment_model_differs: list[str] = Field(
        description="Matched studies read with different segment models: left out of segment kappa."
    )
    wall_motion: dict[Stage, OrdinalAgreement] = Field(
        description="Segment-level wall-motion agreement per stage."
    )
    ischemia_per_patient: BinaryAgreement = Field(description="Ischaemia yes/no per study.")
    ischemia_per_territory: dict[Territory, BinaryAgreement] = Field(
        description="Ischaemia yes/no in each territory."
    )
    ischemia_all_territories: BinaryAgreement = Field(
        description="Ischaemia yes/no per study × territory, the three territories pooled."
    )
    conclusion_disagreements: list[ConclusionDisagreement] = Field(
        description="Studies where status or ischaemic territories differ."
    )
    sources: list[str] = Field(description="Published sources of the method.")
    cautions: list[str] = Field(description="Cautions for reading the figures.")


def run_agreement(records_a: Path | str, records_b: Path | str) -> Agreement:
    """Read two record sets (folders or registries) and measure the readers' agreement."""
    problems: list[InputError] = []
    sets: list[list[Analysis]] = []
    for path in (records_a, records_b):
        try:
            sets.append(read_records(path))
        except (InputError, InputErrors) as exc:
            problems += [p for p in problems_of(exc) if isinstance(p, InputError)]
    if problems:
        raise InputErrors(problems)
    return build_agreement(sets[0], sets[1])


def build_agreement(records_a: Sequence[Analysis], records_b: Sequence[Analysis]) -> Agreement:
    """Agreement of two record sets matched by study id."""
    by_id_a = {r.study.id: r for r in records_a}
    by_id_b = {r.study.id: r for r in records_b}
    matched = sorted(by_id_a.keys() & by_id_b.keys())
    if not matched:
        raise InputError(
            "records",
            f"no study id appears in both record sets ({len(by_id_a)} in A, {len(by_id_b)} in B)",
        )
    pairs = [(by_id_a[i], by_id_b[i]) for i in matched]
    differs = [a.study.id for a, b in pairs if a.segment_model != b.segment_model]
    same_model = [(a, b) for a, b in pairs if a.segment_model == b.segment_model]

    wall_motion: dict[Stage, OrdinalAgreement] = {}
    for stage in Stage:
        result = _stage_agreement(same_model, stage)
        if result is not None:
            wall_motion[stage] = result

    agreement = Agreement(
        schema_version=AGREEMENT_SCHEMA_VERSION,
        generator=f"segreport {_version()}",
        readers_a=sorted({r.study.reader for r in records_a if r.study.reader}),
        readers_b=sorted({r.study.reader for r in records_b if r.study.reader}),
        matched_studies=len(matched),
        only_in_a=sorted(by_id_a.keys() - by_id_b.keys()),
        only_in_b=sorted(by_id_b.keys() - by_id_a.keys()),
        segment_model_differs=differs,
        wall_motion=wall_motion,
        ischemia_per_patient=binary_agreement(
            [(a.conclusion.ischemia, b.conclusion.ischemia) for a, b in pairs]
        ),
        ischemia_per_territory={
            t: binary_agreement([_in_territory(a, b, t) for a, b in pairs]) for t in Territory
        },
        ischemia_all_territories=binary_agreement(
            [_in_territory(a, b, t) for a, b in pairs for t in Territory]
        ),
        conclusion_disagreements=[
            ConclusionDisagreement(
                study_id=a.study.id,
                reader_a=a.study.reader,
                reader_b=b.study.reader,
                status_a=a.conclusion.status,
                status_b=b.conclusion.status,
                territories_a=list(a.conclusion.ischemic_territories),
                territories_b=list(b.conclusion.ischemic_territories),
            )
            for a, b in pairs
            if a.conclusion.status != b.conclusion.status
            or set(a.conclusion.ischemic_territories) != set(b.conclusion.ischemic_territories)
        ],
        sources=list(SOURCES),
        cautions=list(CAUTIONS),
    )
    log.info("reader agreement over %d matched studies", len(matched))
    return agreement


def agreement_json(agreement: Agreement) -> str:
    """The agreement as indented JSON text ending in a newline (stable key order)."""
    return json.dumps(agreement.model_dump(mode="json"), indent=2, ensure_ascii=False) + "\n"


def kappa_statistic(value: float | None) -> KappaStatistic:
    """A kappa with its Landis & Koch band."""
    return KappaStatistic(value=value, label=None if value is None else landis_koch(value))


def binary_agreement(pairs: Sequence[tuple[bool, bool]]) -> BinaryAgreement:
    """Counts, percent agreement and unweighted kappa of yes/no pairs (reader A, reader B)."""
    share = proportion_agreeing(pairs)
    return BinaryAgreement(
        pairs=len(pairs),
        both_positive=sum(1 for a, b in pairs if a and b),
        both_negative=sum(1 for a, b in pairs if not a and not b),
        positive_a_only=sum(1 for a, b in pairs if a and not b),
        positive_b_only=sum(1 for a, b in pairs if b and not a),
        percent_agreement=None if share is None else 100 * share,
        kappa=kappa_statistic(cohen_kappa(pairs, (False, True))),
    )


def ordinal_agreement(
    pairs: Sequence[tuple[int, int]], scale_max: int, studies: int
) -> OrdinalAgreement:
    """Percent agreement and unweighted, linear and quadratic kappa of scores 1…``scale_max``."""
    categories = list(range(1, scale_max + 1))
    share = proportion_agreeing(pairs)
    within = sum(1 for a, b in pairs if abs(a - b) <= 1) / len(pairs) if pairs else None
    return OrdinalAgreement(
        studies=studies,
        pairs=len(pairs),
        scale_max=scale_max,
        percent_agreement=None if share is None else 100 * share,
        percent_within_one_grade=None if within is None else 100 * within,
        unweighted=kappa_statistic(cohen_kappa(pairs, categories, Weighting.NONE)),
        linear=kappa_statistic(cohen_kappa(pairs, categories, Weighting.LINEAR)),
        quadratic=kappa_statistic(cohen_kappa(pairs, categories, Weighting.QUADRATIC)),
    )


def _stage_agreement(
    pairs: Sequence[tuple[Analysis, Analysis]], stage: Stage
) -> OrdinalAgreement | None:
    scores: list[tuple[int, int]] = []
    studies = 0
    scale_max = 0
    for a, b in pairs:
        b_segments = {s.number: s for s in b.segments}
        found = 0
        for seg_a in a.segments:
            seg_b = b_segments.get(seg_a.number)
            score_a = seg_a.wall_motion.get(stage)
            score_b = seg_b.wall_motion.get(stage) if seg_b is not None else None
            if score_a is not None and score_b is not None:
                _check_score(a, seg_a.number, stage, score_a)
                _check_score(b, seg_a.number, stage, score_b)
                scores.append((score_a, score_b))
                found += 1
        if found:
            studies += 1
            scale_max = max(scale_max, a.wall_motion_scale, b.wall_motion_scale)
    if not scores:
        return None
    return ordinal_agreement(scores, scale_max, studies)


def _check_score(record: Analysis, segment: int, stage: Stage, score: int) -> None:
    if not 1 <= score <= record.wall_motion_scale:
        raise InputError(
            f"record {record.study.id}: segments.{segment}.wall_motion.{stage.value}",
            f"score {score} is outside 1–{record.wall_motion_scale}",
        )


def _in_territory(a: Analysis, b: Analysis, territory: Territory) -> tuple[bool, bool]:
    return (
        territory in a.conclusion.ischemic_territories,
        territory in b.conclusion.ischemic_territories,
    )


def _version() -> str:
    from reporting import __version__

    return __version__
