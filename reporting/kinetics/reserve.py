"""Reserve (stress ÷ rest) per segment and territory, cut-off flags and visual cross-checks.

Reserve is computed for the peak stage against rest, for β, A and A·β, from fits whose status is
``ok`` at both stages. A territory combines its segments with good fits at both stages, and reports
how many it used: by default as the ratio of means (mean peak value ÷ mean rest value), which keeps a
single segment with a tiny resting value from dominating; the mean of segment ratios is the
alternative setting. Cross-checks compare each good fit's time to 90 % of plateau with the usual
replenishment bound of its stage (≈ 4 s at rest, ≈ 2 s at peak, from memory) against the visual
perfusion score of the same segment and stage.
"""

from __future__ import annotations

import logging
import statistics
from collections.abc import Callable, Mapping
from pathlib import PurePath

from reporting.kinetics.curves import CurveSet
from reporting.kinetics.fit import fit_curve_set
from reporting.kinetics.models import (
    MODEL_EQUATION,
    Criterion,
    CrossCheckKind,
    CrossCheckNote,
    FitStatus,
    KineticsResult,
    ReserveFlag,
    SegmentFit,
    SegmentReserve,
    TerritoryReserve,
)
from reporting.model import Stage
from reporting.segments import SegmentModel, Territory, segment
from reporting.settings import Settings, TerritoryAggregation, default_settings

log = logging.getLogger(__name__)

STRESS_STAGE = Stage.PEAK
NORMAL_PERFUSION_SCORE = 1
_CRITERIA = (
    "kinetics_min_r_squared",
    "kinetics_beta_min_per_s",
    "kinetics_beta_max_per_s",
    "kinetics_min_frames",
    "kinetics_beta_reserve_min",
    "kinetics_a_beta_reserve_min",
    "kinetics_territory_flow_reserve_min",
    "kinetics_rest_replenishment_max_s",
    "kinetics_peak_replenishment_max_s",
)

TerritoryOf = Callable[[int], Territory] | Mapping[int, Territory]


def analyze_kinetics(
    curves: CurveSet,
    *,
    segment_model: SegmentModel | int,
    territory_of: TerritoryOf,
    perfusion_scores: Mapping[Stage, Mapping[int, int | None]] | None = None,
    settings: Settings | None = None,
) -> KineticsResult:
    """Fit every curve of ``curves`` and derive reserve, territory reserve and cross-checks.

    ``territory_of`` maps every segment number of the model to its territory (a function or a
    mapping); ``perfusion_scores`` holds the visual scores per stage (segment -> score, ``None``
    not visualised). ``curves`` must have been checked against the same segment model.
    """
    settings = settings or default_settings()
    model = SegmentModel(segment_model)
    if curves.segment_model is not model and any(c.segment > model for c in curves.curves):
        raise ValueError(f"load the curves with segment_model={int(model)} to analyse them")
    lookup = territory_of.__getitem__ if isinstance(territory_of, Mapping) else territory_of
    fits, unassigned = fit_curve_set(curves, settings)
    reserve = segment_reserve(fits, lookup, settings)
    territories = {
        t: territory_reserve(
            t, fits, reserve, [n for n in range(1, model + 1) if lookup(n) is t], settings
        )
        for t in Territory
    }
    log.debug(
        "kinetics of %s: %d of %d fits ok, %d unassigned curves",
        curves.source,
        sum(f.status is FitStatus.OK for f in fits),
        len(fits),
        len(unassigned),
    )
    return KineticsResult(
        model=MODEL_EQUATION,
        source_file=_file_name(curves.source),
        intensity_scale=curves.intensity_scale,
        segments=fits,
        unassigned_curves=unassigned,
        reserve=reserve,
        territory_reserve=territories,
        cross_checks=cross_checks(fits, perfusion_scores or {}, model, settings),
        fits_ok=sum(f.status is FitStatus.OK for f in fits),
        fits_total=len(fits),
        criteria=[
            Criterion(name=name, value=float(getattr(settings, name)), source=settings.cited(name))
            for name in _CRITERIA
        ],
    )


def segment_reserve(
    fits: list[SegmentFit], territory_of: Callable[[int], Territory], settings: Settings
) -> list[SegmentReserve]:
    """Peak ÷ rest for every segment with a curve at rest or peak, in segment order."""
    by_key = {(f.stage, f.number): f for f in fits}
    numbers = sorted({f.number for f in fits if f.stage in (Stage.REST, STRESS_STAGE)})
    out: list[SegmentReserve] = []
    for n in numbers:
        rest, stress = by_key.get((Stage.REST, n)), by_key.get((STRESS_STAGE, n))
        beta_r = a_r = ab_r = None
        flags: list[ReserveFlag] = []
        if _good(rest) and _good(stress):
            assert rest is not None and stress is not None
            beta_r = _ratio(stress.beta, rest.beta)
            a_r = _ratio(stress.A, rest.A)
            ab_r = _ratio(stress.A_beta, rest.A_beta)
            if beta_r is not None and beta_r < settings.kinetics_beta_reserve_min:
                flags.append(ReserveFlag.LOW_BETA_RESERVE)
            if ab_r is not None and ab_r < settings.kinetics_a_beta_reserve_min:
                flags.append(ReserveFlag.LOW_A_BETA_RESERVE)
        out.append(
            SegmentReserve(
                number=n,
                territory=territory_of(n),
                stress_stage=STRESS_STAGE,
                beta_reserve=beta_r,
                A_reserve=a_r,
                A_beta_reserve=ab_r,
                rest_status=rest.status if rest else None,
                stress_status=stress.status if stress else None,
                flags=flags,
            )
        )
    return out


def territory_reserve(
    territory: Territory,
    fits: list[SegmentFit],
    reserve: list[SegmentReserve],
    territory_segments: list[int],
    settings: Settings,
) -> TerritoryReserve:
    """Combine the territory's segments that have good fits at rest and peak."""
    how = settings.kinetics_territory_aggregation
    used = [
        r
        for r in reserve
        if r.number in territory_segments
        and r.rest_status is FitStatus.OK
        and r.stress_status is FitStatus.OK
        and r.A_beta_reserve is not None
    ]
    beta_r = a_r = ab_r = None
    if used:
        if how is TerritoryAggregation.MEAN_OF_RATIOS:
            beta_r = statistics.fmean(_known(r.beta_reserve) for r in used)
            a_r = statistics.fmean(_known(r.A_reserve) for r in used)
            ab_r = statistics.fmean(_known(r.A_beta_reserve) for r in used)
        else:
            beta_r, a_r, ab_r = _ratio_of_means(used, fits)
    flags: list[ReserveFlag] = []
    if beta_r is not None and beta_r < settings.kinetics_beta_reserve_min:
        flags.append(ReserveFlag.LOW_BETA_RESERVE)
    if ab_r is not None and ab_r < settings.kinetics_territory_flow_reserve_min:
        flags.append(ReserveFlag.LOW_FLOW_RESERVE)
    numbers = [r.number for r in used]
    return TerritoryReserve(
        territory=territory,
        aggregation=how,
        segments_used=numbers,
        count=len(numbers),
        segments_excluded=[n for n in territory_segments if n not in numbers],
        beta_reserve=beta_r,
        A_reserve=a_r,
        A_beta_reserve=ab_r,
        flags=flags,
    )


def cross_checks(
    fits: list[SegmentFit],
    scores: Mapping[Stage, Mapping[int, int | None]],
    model: SegmentModel,
    settings: Settings,
) -> list[CrossCheckNote]:
    """Good fits whose replenishment time disagrees with the visual score of the same stage."""
    bounds = {
        Stage.REST: (
            "kinetics_rest_replenishment_max_s",
            settings.kinetics_rest_replenishment_max_s,
        ),
        Stage.PEAK: (
            "kinetics_peak_replenishment_max_s",
            settings.kinetics_peak_replenishment_max_s,
        ),
    }
    notes: list[CrossCheckNote] = []
    for fit in fits:
        if fit.stage not in bounds or fit.status is not FitStatus.OK:
            continue
        score = scores.get(fit.stage, {}).get(fit.number)
        seconds = fit.time_to_90_percent_s
        if score is None or seconds is None:
            continue
        setting, bound = bounds[fit.stage]
        slow = seconds > bound
        if score == NORMAL_PERFUSION_SCORE and slow:
            kind = CrossCheckKind.VISUAL_NORMAL_SLOW_REPLENISHMENT
            text = (
                f"Segment {_name(model, fit.number)} at {fit.stage.value}: scored normal visually, "
                f"but the fitted replenishment reaches 90 % of plateau in {seconds:.1f} s, beyond "
                f"the usual {bound:g} s; review the images."
            )
        elif score > NORMAL_PERFUSION_SCORE and not slow:
            kind = CrossCheckKind.VISUAL_ABNORMAL_NORMAL_REPLENISHMENT
            text = (
                f"Segment {_name(model, fit.number)} at {fit.stage.value}: scored "
                f"{'reduced' if score == 2 else 'absent'} visually, but the fitted replenishment "
                f"reaches 90 % of plateau in {seconds:.1f} s, within the usual {bound:g} s; "
                f"review the images."
            )
        else:
            continue
        notes.append(
            CrossCheckNote(
                number=fit.number,
                stage=fit.stage,
                kind=kind,
                perfusion_score=score,
                time_to_90_percent_s=seconds,
                bound_s=bound,
                text=text,
                source=settings.cited(setting),
            )
        )
    return notes


def _good(fit: SegmentFit | None) -> bool:
    return fit is not None and fit.status is FitStatus.OK


def _ratio(stress: float | None, rest: float | None) -> float | None:
    if stress is None or rest is None or rest <= 0:
        return None
    return stress / rest


def _known(value: float | None) -> float:
    assert value is not None
    return value


def _ratio_of_means(
    used: list[SegmentReserve], fits: list[SegmentFit]
) -> tuple[float | None, float | None, float | None]:
    by_key = {(f.stage, f.number): f for f in fits}
    rest = [by_key[(Stage.REST, r.number)] for r in used]
    stress = [by_key[(STRESS_STAGE, r.number)] for r in used]

    def mean_ratio(attribute: str) -> float | None:
        top = statistics.fmean(_known(getattr(f, attribute)) for f in stress)
        bottom = statistics.fmean(_known(getattr(f, attribute)) for f in rest)
        return _ratio(top, bottom)

    return mean_ratio("beta"), mean_ratio("A"), mean_ratio("A_beta")


def _name(model: SegmentModel, number: int) -> str:
    if 1 <= number <= int(model):
        return f"{number} ({segment(model, number).name})"
    return str(number)


def _file_name(source: str) -> str | None:
    return PurePath(source).name or None
