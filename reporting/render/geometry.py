"""Polar geometry of the bull's-eye map: where each segment's sector lies, and where territories meet.

Positions come from the segment table (``data/segments.csv``; Cerqueira MD et al., Circulation
2002;105:539, fig. 1; Lang RM et al., JASE 2015;28:1, fig. 3): basal ring outside, then mid, apical
and, for 17 segments, the apex cap as the centre disc; angles in degrees anticlockwise from 3 o'clock,
which is also the drawing's own convention, so anterior is at the top, septum on the viewer's left.
All lengths here are fractions of the map radius; drawing code scales them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cache

from reporting.segments import Ring, SegmentModel, Territory, segments_of


@dataclass(frozen=True)
class Sector:
    """Where one segment sits on the map; radii as fractions of the map radius."""

    number: int
    ring: Ring
    center_deg: float
    span_deg: float
    r_inner: float
    r_outer: float

    @property
    def start_deg(self) -> float:
        return self.center_deg - self.span_deg / 2

    @property
    def end_deg(self) -> float:
        return self.center_deg + self.span_deg / 2

    def label_point(self) -> tuple[float, float]:
        """Where the sector's digit goes, relative to the centre, in map radii."""
        if self.span_deg >= 360:
            return 0.0, 0.0
        r = (self.r_inner + self.r_outer) / 2 if self.r_inner > 0 else self.r_outer * 0.62
        a = math.radians(self.center_deg)
        return r * math.cos(a), r * math.sin(a)


# Ring radii (outer edge first): equal-width rings with a centre disc, or pie slices in the middle.
_RADII_WITH_CAP = {Ring.BASAL: (0.74, 1.0), Ring.MID: (0.48, 0.74), Ring.APICAL: (0.22, 0.48)}
_RADII_NO_CAP = {Ring.BASAL: (0.71, 1.0), Ring.MID: (0.43, 0.71), Ring.APICAL: (0.0, 0.43)}


@cache
def sectors(model: SegmentModel | int) -> tuple[Sector, ...]:
    """The sector of every segment of ``model``, in segment order."""
    segs = segments_of(model)
    has_cap = any(s.ring is Ring.APEX for s in segs)
    radii = _RADII_WITH_CAP if has_cap else _RADII_NO_CAP
    out = []
    for s in segs:
        inner, outer = (
            (0.0, _RADII_WITH_CAP[Ring.APICAL][0]) if s.ring is Ring.APEX else radii[s.ring]
        )
        out.append(Sector(s.number, s.ring, s.center_deg, s.span_deg, inner, outer))
    return tuple(out)


def _arc(r: float, start: float, end: float, step: float = 4.0) -> list[tuple[float, float]]:
    steps = max(1, math.ceil(abs(end - start) / step))
    return [
        (
            r * math.cos(math.radians(start + (end - start) * i / steps)),
            r * math.sin(math.radians(start + (end - start) * i / steps)),
        )
        for i in range(steps + 1)
    ]


@cache
def sector_outline(sector: Sector, step: float = 4.0) -> tuple[tuple[float, float], ...]:
    """Closed outline of a sector in map radii (no repeated first point)."""
    if sector.span_deg >= 360:
        return tuple(_arc(sector.r_outer, 0, 360, step)[:-1])
    outer = _arc(sector.r_outer, sector.start_deg, sector.end_deg, step)
    if sector.r_inner <= 0:
        return (*outer, (0.0, 0.0))
    return tuple(outer + _arc(sector.r_inner, sector.end_deg, sector.start_deg, step))


def hatch_lines(
    outline: tuple[tuple[float, float], ...], spacing: float
) -> list[tuple[tuple[float, float], tuple[float, float]]]:
    """45° hatch lines clipped to a simple polygon (even–odd crossings along each line)."""
    c = s = math.sqrt(0.5)
    proj = [(-x * s + y * c) for x, y in outline]
    lines = []
    t = math.floor(min(proj) / spacing) * spacing + spacing / 2
    while t < max(proj):
        hits: list[float] = []
        for (ax, ay), (bx, by) in zip(outline, (*outline[1:], outline[0]), strict=True):
            fa, fb = -ax * s + ay * c - t, -bx * s + by * c - t
            if (fa > 0) != (fb > 0):
                k = fa / (fa - fb)
                px, py = ax + (bx - ax) * k, ay + (by - ay) * k
                hits.append(px * c + py * s)
        hits.sort()
        for u0, u1 in zip(hits[::2], hits[1::2], strict=False):
            lines.append(((u0 * c - t * s, u0 * s + t * c), (u1 * c - t * s, u1 * s + t * c)))
        t += spacing
    return lines


@dataclass(frozen=True)
class Edge:
    """A piece of boundary in map radii: an arc (``r0 == r1``) or a radial line (``a0 == a1``)."""

    r0: float
    r1: float
    a0: float
    a1: float


@cache
def territory_boundaries(model: SegmentModel, territories: tuple[Territory, ...]) -> list[Edge]:
    """Edges between neighbouring sectors of different territories.

    ``territories`` gives the territory of each segment in segment order.
    """
    secs = sectors(model)
    territory = {s.number: t for s, t in zip(secs, territories, strict=True)}
    order = [Ring.BASAL, Ring.MID, Ring.APICAL, Ring.APEX]
    rings = [r for r in order if any(s.ring is r for s in secs)]
    edges: list[Edge] = []
    for a in secs:
        if a.span_deg < 360:
            # radial edge at a's start angle, shared with the ring neighbour ending there
            for b in secs:
                neighbours = b.ring is a.ring and _same_angle(b.end_deg, a.start_deg)
                if neighbours and territory[a.number] is not territory[b.number]:
                    edges.append(Edge(a.r_inner, a.r_outer, a.start_deg, a.start_deg))
        ring_index = rings.index(a.ring)
        if ring_index == 0:
            continue
        for b in secs:
            if b.ring is not rings[ring_index - 1] or territory[a.number] is territory[b.number]:
                continue
            overlap = _overlap(a, b)
            if overlap is not None:
                edges.append(Edge(a.r_outer, a.r_outer, *overlap))
    return edges


def _same_angle(x: float, y: float) -> bool:
    return abs((x - y + 180) % 360 - 180) < 1e-6


def _overlap(inner: Sector, outer: Sector) -> tuple[float, float] | None:
    """Angular range where ``inner``'s outer arc meets ``outer``'s inner arc."""
    if inner.span_deg >= 360:
        return outer.start_deg, outer.end_deg
    d = (outer.center_deg - inner.center_deg + 180) % 360 - 180
    lo = max(-inner.span_deg / 2, d - outer.span_deg / 2)
    hi = min(inner.span_deg / 2, d + outer.span_deg / 2)
    if hi - lo <= 1e-6:
        return None
    return inner.center_deg + lo, inner.center_deg + hi
