"""What the curve grid shows: one panel per segment with a curve, grouped by coronary territory
under the map the analysis used, and the time axis every panel shares.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from reporting.kinetics.models import FitStatus, SegmentFit, TerritoryReserve
from reporting.model import STAGE_ORDER
from reporting.results import Analysis, SegmentResult
from reporting.segments import Territory


@dataclass(frozen=True)
class Panel:
    """One segment's fits, in stage order."""

    segment: SegmentResult
    fits: tuple[SegmentFit, ...]

    @property
    def flagged(self) -> tuple[SegmentFit, ...]:
        """Fits whose status is not 'ok' (left out of the reserve)."""
        return tuple(f for f in self.fits if f.status is not FitStatus.OK)


@dataclass(frozen=True)
class TerritoryBlock:
    """The panels of one territory, with its reserve and the segments that had no curve."""

    territory: Territory
    panels: tuple[Panel, ...]
    without_curves: tuple[int, ...]
    reserve: TerritoryReserve | None


def curve_blocks(analysis: Analysis) -> list[TerritoryBlock]:
    """One block per territory with at least one fitted segment, in LAD, LCx, RCA order."""
    kinetics = analysis.kinetics
    if kinetics is None:
        return []
    by_segment: dict[int, list[SegmentFit]] = {}
    for fit in kinetics.segments:
        by_segment.setdefault(fit.number, []).append(fit)
    blocks = []
    for territory in Territory:
        mine = [s for s in analysis.segments if s.territory is territory]
        panels = tuple(
            Panel(s, tuple(sorted(by_segment[s.number], key=lambda f: STAGE_ORDER.index(f.stage))))
            for s in mine
            if s.number in by_segment
        )
        if panels:
            missing = tuple(s.number for s in mine if s.number not in by_segment)
            reserve = kinetics.territory_reserve.get(territory)
            blocks.append(TerritoryBlock(territory, panels, missing, reserve))
    return blocks


def time_axis(analysis: Analysis) -> tuple[float, float]:
    """(end, tick step) of the time axis shared by every panel, in seconds."""
    times = [t for f in analysis.kinetics.segments for t in f.time_s] if analysis.kinetics else []
    end = max(times, default=0.0)
    if end <= 0:
        return 10.0, 5.0
    step = next(s for s in (0.5, 1, 2, 5, 10, 20, 50, 100, 200, 500, 1e9) if end / s <= 4)
    return math.ceil(end / step - 1e-9) * step, step
