"""What the entry page draws: bull's-eye sector outlines, territory boundaries and the palette.

The outlines come from :mod:`reporting.render.geometry`, the same polar geometry as the PDF maps
(Cerqueira MD et al., Circulation 2002;105:539, fig. 1: anterior at the top, septum on the viewer's
left), turned into SVG path data on a map of radius :data:`RADIUS` centred at the origin, with y pointing down as
SVG has it. Fills come from :mod:`reporting.render.scheme`, so a score looks the same on the page as
in the report.
"""

from __future__ import annotations

import math
from functools import cache
from typing import Any

from reporting.render import palette as house_palette
from reporting.render import scheme
from reporting.render.geometry import Edge, Sector, sectors, territory_boundaries
from reporting.segments import (
    BUILT_IN_MAPS,
    SegmentModel,
    Territory,
    TerritoryMap,
    built_in_map,
    segments_of,
)

RADIUS = 100.0
"""Map radius in SVG user units (the page's viewBox is drawn around it)."""


def _point(r: float, deg: float) -> str:
    a = math.radians(deg)
    return f"{RADIUS * r * math.cos(a):.2f} {-RADIUS * r * math.sin(a):.2f}"


def _r(r: float) -> str:
    return f"{RADIUS * r:.2f}"


def sector_d(sector: Sector) -> str:
    """SVG path data of one sector (true arcs): outer arc anticlockwise, back along the inner arc."""
    r1, r0 = sector.r_outer, sector.r_inner
    if sector.span_deg >= 360:
        return f"M {_point(r1, 0)} A {_r(r1)} {_r(r1)} 0 1 0 {_point(r1, 180)} A {_r(r1)} {_r(r1)} 0 1 0 {_point(r1, 0)} Z"
    a0, a1 = sector.start_deg, sector.end_deg
    large = 1 if sector.span_deg > 180 else 0
    d = f"M {_point(r1, a0)} A {_r(r1)} {_r(r1)} 0 {large} 0 {_point(r1, a1)}"
    if r0 > 0:
        d += f" L {_point(r0, a1)} A {_r(r0)} {_r(r0)} 0 {large} 1 {_point(r0, a0)}"
    else:
        d += " L 0 0"
    return d + " Z"


def edges_d(edges: list[Edge]) -> str:
    """Territory boundaries as one SVG path of open pieces."""
    parts = []
    for e in edges:
        if e.r0 == e.r1:
            sweep_large = 1 if abs(e.a1 - e.a0) > 180 else 0
            parts.append(
                f"M {_point(e.r0, e.a0)} A {_r(e.r0)} {_r(e.r0)} 0 {sweep_large} 0 {_point(e.r0, e.a1)}"
            )
        else:
            parts.append(f"M {_point(e.r0, e.a0)} L {_point(e.r1, e.a0)}")
    return " ".join(parts)


def boundaries_d(model: SegmentModel, territory_map: TerritoryMap) -> str:
    """Territory boundaries of ``model`` under ``territory_map``."""
    territories = tuple(territory_map.territory_of(model, s.number) for s in segments_of(model))
    return edges_d(territory_boundaries(model, territories))


def territory_boundaries_d(model: SegmentModel, territories: list[Territory]) -> str:
    """Territory boundaries for the territories an analysis assigned (segment order)."""
    return edges_d(territory_boundaries(model, tuple(territories)))


@cache
def page_geometry() -> dict[str, Any]:
    """Everything the page script needs to draw and colour the maps of every segment model."""
    models: dict[str, Any] = {}
    for model in SegmentModel:
        by_number = {s.number: s for s in segments_of(model)}
        models[str(int(model))] = {
            "sectors": [
                {
                    "number": sec.number,
                    "name": by_number[sec.number].name,
                    "ring": sec.ring.value,
                    "d": sector_d(sec),
                    "label": [round(RADIUS * x, 2) for x in _label(sec)],
                }
                for sec in sectors(model)
            ],
            "boundaries": {
                name: boundaries_d(model, built_in_map(name))
                for name in BUILT_IN_MAPS
                if built_in_map(name).supports(model)
            },
        }
    return {"radius": RADIUS, "models": models, "palette": palette()}


def _label(sec: Sector) -> tuple[float, float]:
    x, y = sec.label_point()
    return x, -y


def _hex(color: Any) -> str:
    return f"#{color.hexval()[2:]}"


def palette() -> dict[str, Any]:
    """Fills and text colours for each score, and their words, as the report uses them."""

    def entry(fill: Any, word: str) -> dict[str, str]:
        return {"fill": _hex(fill), "ink": _hex(house_palette.text_on(fill)), "word": word}

    return {
        "wall_motion": {
            str(s): entry(scheme.wall_motion_fill(s), w)
            for s, w in scheme.WALL_MOTION_WORDS.items()
        },
        "perfusion": {
            str(s): entry(scheme.perfusion_fill(s), w) for s, w in scheme.PERFUSION_WORDS.items()
        },
        "not_seen": entry(house_palette.NOT_SEEN_FILL, "not visualised"),
    }
