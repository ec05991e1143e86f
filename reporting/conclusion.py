"""The answer of a study: territory status, diagnostic status, multivessel pattern and extent.

Rules (each a published source or common practice, as marked):

- A territory is non-diagnostic when none of its segments was seen at baseline and at stress; a study
  cannot be called negative while one territory is unread [common practice].
- The study is ischaemic when any segment is ischaemic by wall motion (ischemic or biphasic) or has a
  reversible perfusion defect; otherwise non-diagnostic when there are no stress images, a territory
  is non-diagnostic, or stress was inadequate (a negative study below the target heart rate is
  non-diagnostic: Ballal RS et al., 1997; not applicable to vasodilator stress); otherwise negative.
- Wrap-around LAD: apical segments of a long LAD often reach the inferior and lateral apex
  (Ortiz-Pérez JT et al., JACC Cardiovasc Imaging 2008;1:282). An RCA or LCx apical-ring segment
  counts toward a multivessel pattern only when its territory also has basal or mid ischaemia, or the
  LAD has none [common practice]; ``ischemic_territories`` keeps the territory map's assignment.
- Extent counts wall-motion and perfusion ischaemia together (Kataoka A et al., Cardiovasc
  Ultrasound 2015;13:47: mild 1–2, moderate–severe ≥ 3 segments).
"""

from __future__ import annotations

from dataclasses import dataclass

from reporting import scoring
from reporting.findings import high_risk_findings
from reporting.model import Stage, Study
from reporting.results import (
    Conclusion,
    DiagnosticStatus,
    NonDiagnosticReason,
    SegmentResult,
    StressResult,
    TerritoryResult,
    TerritoryStatus,
)
from reporting.risk import grade_risk
from reporting.scoring import (
    ISCHEMIC_PERFUSION,
    ISCHEMIC_RESPONSES,
    VIABLE_RESPONSES,
    WallMotionResponse,
)
from reporting.segments import Ring, Territory
from reporting.settings import Settings


def seen_at_baseline_and_stress(segment: SegmentResult) -> bool:
    """The segment was seen at a baseline and at a stress stage (by wall motion or perfusion)."""
    return (
        segment.response is not WallMotionResponse.NOT_ASSESSABLE
        or segment.perfusion_response is not scoring.PerfusionResponse.NOT_ASSESSABLE
    )


def is_ischemic(segment: SegmentResult) -> bool:
    """Ischaemic by wall motion (ischemic or biphasic) or by a reversible perfusion defect."""
    return (
        segment.response in ISCHEMIC_RESPONSES or segment.perfusion_response in ISCHEMIC_PERFUSION
    )


def territory_status(segments: list[SegmentResult]) -> TerritoryStatus:
    """Status of a territory from its segments (a territory with no segments under the map has
    nothing left unread: no_ischemia)."""
    if any(is_ischemic(s) for s in segments):
        return TerritoryStatus.ISCHEMIA
    if segments and not any(seen_at_baseline_and_stress(s) for s in segments):
        return TerritoryStatus.NON_DIAGNOSTIC
    return TerritoryStatus.NO_ISCHEMIA


def diagnostic_status(
    *,
    ischemia: bool,
    stress_imaged: bool,
    territories: dict[Territory, TerritoryResult],
    rate_dependent: bool,
    adequate: bool,
) -> tuple[DiagnosticStatus, NonDiagnosticReason | None]:
    """The study's status and, when non-diagnostic, the first reason that applies."""
    if ischemia:
        return DiagnosticStatus.ISCHEMIA, None
    if not stress_imaged:
        return DiagnosticStatus.NON_DIAGNOSTIC, NonDiagnosticReason.NO_STRESS_IMAGES
    if any(t.status is TerritoryStatus.NON_DIAGNOSTIC for t in territories.values()):
        return DiagnosticStatus.NON_DIAGNOSTIC, NonDiagnosticReason.TERRITORY_NOT_ASSESSABLE
    if rate_dependent and not adequate:
        return DiagnosticStatus.NON_DIAGNOSTIC, NonDiagnosticReason.STRESS_INADEQUATE
    return DiagnosticStatus.NO_ISCHEMIA, None


@dataclass(frozen=True)
class VesselPattern:
    """Territories that count toward a multivessel pattern, and the wrap-around segments left out."""

    counted_territories: list[Territory]
    wrap_around_segments: list[int]

    def multivessel(self, settings: Settings) -> bool:
        return len(self.counted_territories) >= settings.multivessel_territories_min


def vessel_pattern(ischemic: list[SegmentResult]) -> VesselPattern:
    """Apply the wrap-around LAD rule to the ischaemic segments (those :func:`is_ischemic`)."""
    by_territory: dict[Territory, list[SegmentResult]] = {}
    for s in ischemic:
        by_territory.setdefault(s.territory, []).append(s)
    lad_ischemic = _LAD in by_territory
    counted: list[Territory] = []
    wrap: list[int] = []
    for territory in _TERRITORIES:  # in the enum's order, as the record lists them
        mine = by_territory.get(territory)
        if not mine:
            continue
        apical_only = all(s.ring is _APICAL for s in mine)
        if territory is _LAD or not apical_only or not lad_ischemic:
            counted.append(territory)
        else:
            wrap += [s.number for s in mine]
    return VesselPattern(counted, sorted(wrap))


# Enum members and order read per segment: an enum class attribute costs about ten times a global
# on Python 3.11.
_TERRITORIES = tuple(Territory)
_LAD = Territory.LAD
_APICAL = Ring.APICAL
_FIXED = WallMotionResponse.FIXED
_AKINETIC_TO_DYSKINETIC = WallMotionResponse.AKINETIC_TO_DYSKINETIC


def stress_imaged(study: Study) -> bool:
    """Some stress stage (low dose, peak or recovery) carries wall-motion or perfusion scores."""
    return any(
        stage is not Stage.REST and (data.wall_motion is not None or data.perfusion is not None)
        for stage, data in study.stages.items()
    )


def conclude(
    study: Study,
    settings: Settings,
    segments: list[SegmentResult],
    territories: dict[Territory, TerritoryResult],
    wmsi: dict[Stage, float],
    stress_result: StressResult,
) -> Conclusion:
    """The conclusion of the study: status, territories, pattern, extent, findings and risk."""
    ischemic_results = [s for s in segments if is_ischemic(s)]
    ischemic = [s.number for s in ischemic_results]
    ischemic_territories = [t for t, r in territories.items() if r.ischemic]
    status, reason = diagnostic_status(
        ischemia=bool(ischemic),
        stress_imaged=stress_imaged(study),
        territories=territories,
        rate_dependent=stress_result.heart_rate_target_applies,
        adequate=stress_result.adequate,
    )
    pattern = vessel_pattern(ischemic_results)
    reversible = [s for s in segments if s.perfusion_response in ISCHEMIC_PERFUSION]
    reversible_percent = 100 * len(reversible) / len(segments)
    high_risk = high_risk_findings(
        study,
        settings,
        segments,
        ischemic,
        pattern.counted_territories if pattern.multivessel(settings) else [],
        reversible_percent,
        wmsi,
        stress_result,
    )
    risk, criteria = grade_risk(
        study,
        settings,
        status=status,
        ischemic_segments=ischemic,
        reversible_percent=reversible_percent,
        high_risk=high_risk,
        stress_result=stress_result,
    )
    return Conclusion(
        ischemia=bool(ischemic),
        status=status,
        non_diagnostic_reason=reason,
        ischemic_segments=ischemic,
        ischemic_territories=ischemic_territories,
        ischemic_segment_count=sum(s.response in ISCHEMIC_RESPONSES for s in ischemic_results),
        ischemia_extent=scoring.ischemia_extent(
            len(ischemic), settings.extensive_ischemia_segments_min
        ),
        multivessel=pattern.multivessel(settings),
        wrap_around_segments=pattern.wrap_around_segments,
        viable_segments=[s.number for s in segments if s.response in VIABLE_RESPONSES],
        fixed_segments=[s.number for s in segments if s.response is _FIXED],
        akinetic_to_dyskinetic_segments=[
            s.number for s in segments if s.response is _AKINETIC_TO_DYSKINETIC
        ],
        high_risk_findings=high_risk,
        risk=risk,
        risk_criteria=criteria,
    )
