"""Bull's-eye (polar) maps of the left ventricle as reportlab ``Drawing``s and SVG.

Positions come from :mod:`reporting.render.geometry` (Cerqueira MD et al., Circulation 2002;105:539,
fig. 1; Lang RM et al., JASE 2015;28:1, fig. 3): anterior at the top, septum on the viewer's left,
lateral on the right, inferior at the bottom, the apex cap as the centre disc of the 17-segment map.

Each map has one purpose (segment numbers and territories, wall motion at one stage, segment
response, perfusion at one stage). Every sector is one closed path (true circular arcs as Bézier
curves) carrying a digit or letter, so the map reads in greyscale; not-visualised sectors are hatched
and marked ``x``; a thicker line runs wherever neighbouring sectors belong to different territories
under the map the analysis used. Colours and their published palettes: :mod:`reporting.render.palette`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

from reportlab.lib.colors import Color
from reportlab.pdfbase.pdfmetrics import stringWidth

from reporting.kinetics.models import ReserveFlag
from reporting.model import Protocol, Stage
from reporting.render import palette
from reporting.render.fonts import MAP_FONTS, Fonts
from reporting.render.geometry import (
    Edge,
    Sector,
    hatch_lines,
    sector_outline,
    sectors,
    territory_boundaries,
)
from reporting.render.legend import draw_legend, legend_items
from reporting.render.scheme import (
    PERFUSION_WORDS,
    RESERVE_ADEQUATE,
    RESERVE_LOW,
    RESPONSE_STYLE,
    TERRITORY_FILL,
    WALL_MOTION_WORDS,
    MapKind,
    perfusion_fill,
    wall_motion_fill,
)
from reporting.render.shapes import Circle, Drawing, Group, Path, String
from reporting.render.vector import TaggedGroup, TaggedPath, svg_document
from reporting.results import Analysis, SegmentResult
from reporting.scoring import WallMotionResponse
from reporting.wording import stage_words

HATCH_SPACING_PT = 2.6
MERGED_CAPTION_CHARS = 44
"""Longest caption naming the merged stages (fits a quarter of the page at the caption size)."""


@dataclass(frozen=True)
class MapSpec:
    """One map: its kind and, for score maps, its stage."""

    kind: MapKind
    stage: Stage | None = None
    protocol: Protocol | None = None
    """The study's protocol: exercise studies title their stages with workload words."""
    merged: tuple[Stage, ...] = ()
    """Stages this one map stands for (``stage`` first): identical all-normal stages shown once."""

    @property
    def key(self) -> str:
        """File-name part, e.g. ``wall_motion-peak``."""
        return self.kind.value if self.stage is None else f"{self.kind.value}-{self.stage.value}"

    @property
    def title(self) -> str:
        titles = {
            MapKind.SEGMENTS: "Segments and territories",
            MapKind.WALL_MOTION: "Wall motion",
            MapKind.RESPONSE: "Segment response",
            MapKind.PERFUSION: "Perfusion",
            MapKind.RESERVE: "Flow reserve (A·β)",
            MapKind.CHANGE: "Change since the prior study",
        }
        if self.stage is None:
            return titles[self.kind]
        if len(self.merged) > 1:
            return f"{titles[self.kind]} – {merged_stage_words(self.merged, self.protocol)}"
        return f"{titles[self.kind]} – {stage_title(self.stage, self.protocol)}"


def merged_stage_words(stages: tuple[Stage, ...], protocol: Protocol | None = None) -> str:
    """``rest and peak``; ``all stages`` for more than two."""
    if len(stages) == 2:
        return " and ".join(stage_title(s, protocol) for s in stages)
    return "all stages"


def stage_title(stage: Stage, protocol: Protocol | None = None) -> str:
    """``low dose`` (``low workload`` in an exercise study): :func:`reporting.wording.stage_words`."""
    return stage_words(stage, protocol)


def map_specs(analysis: Analysis) -> list[MapSpec]:
    """The maps a report of ``analysis`` shows, in order."""
    wall_stages = [s for s in analysis.stages if s in analysis.segments[0].wall_motion]
    perf_stages = [s for s in analysis.stages if s in analysis.segments[0].perfusion]
    protocol = analysis.protocol
    specs = [MapSpec(MapKind.WALL_MOTION, s, protocol) for s in wall_stages]
    specs.append(MapSpec(MapKind.SEGMENTS))
    if Stage.REST in wall_stages and Stage.PEAK in wall_stages:
        specs.append(MapSpec(MapKind.RESPONSE))
    specs += [MapSpec(MapKind.PERFUSION, s, protocol) for s in perf_stages]
    if analysis.kinetics is not None and analysis.kinetics.reserve:
        specs.append(MapSpec(MapKind.RESERVE))
    return specs


def _all_normal(scores: list[dict[Stage, int | None]], stages: list[Stage]) -> bool:
    """Every segment seen and scored normal (1) at every one of ``stages``."""
    return all(seg.get(stage) == 1 for seg in scores for stage in stages)


def page_map_specs(analysis: Analysis) -> list[MapSpec]:
    """The maps the PDF shows: :func:`map_specs` with maps that carry no information merged.

    Wall-motion (or perfusion) stages that are all normal, every segment seen, are one map titled
    with the stages it stands for; its caption says so. With every wall-motion stage normal, the
    response map (all normal by definition) is left out. The SVG files keep one map per stage.
    """
    specs = map_specs(analysis)
    out: list[MapSpec] = []
    for kind, scores in (
        (MapKind.WALL_MOTION, [s.wall_motion for s in analysis.segments]),
        (MapKind.PERFUSION, [s.perfusion for s in analysis.segments]),
    ):
        stages = tuple(s.stage for s in specs if s.kind is kind and s.stage is not None)
        if len(stages) > 1 and _all_normal(scores, list(stages)):
            merged = MapSpec(kind, stages[0], analysis.protocol, merged=stages)
            first = next(i for i, s in enumerate(specs) if s.kind is kind)
            specs = [s for s in specs if s.kind is not kind]
            specs.insert(first, merged)
    wall = [s for s in specs if s.kind is MapKind.WALL_MOTION]
    for spec in specs:
        if spec.kind is MapKind.RESPONSE and len(wall) == 1 and len(wall[0].merged) > 1:
            continue
        out.append(spec)
    return out


# --- what each sector shows -------------------------------------------------------------------


@dataclass(frozen=True)
class Cell:
    """Fill, mark and tooltip of one sector."""

    fill: Color
    mark: str
    hatched: bool
    tooltip: str


def _not_seen(seg: SegmentResult, what: str) -> Cell:
    return Cell(palette.NOT_SEEN_FILL, "x", True, f"{seg.number} {seg.name}: {what}")


def cells(analysis: Analysis, spec: MapSpec) -> dict[int, Cell]:
    """What every sector of ``spec`` shows."""
    if spec.kind is MapKind.CHANGE:
        return _change_cells(analysis)
    out: dict[int, Cell] = {}
    reserve = {r.number: r for r in analysis.kinetics.reserve} if analysis.kinetics else {}
    for seg in analysis.segments:
        n, name = seg.number, seg.name
        if spec.kind is MapKind.SEGMENTS:
            out[n] = Cell(
                TERRITORY_FILL[seg.territory], str(n), False, f"{n} {name}: {seg.territory}"
            )
        elif spec.kind in (MapKind.WALL_MOTION, MapKind.PERFUSION):
            wall = spec.kind is MapKind.WALL_MOTION
            scores, colour_of, meaning = (
                (seg.wall_motion, wall_motion_fill, WALL_MOTION_WORDS)
                if wall
                else (seg.perfusion, perfusion_fill, PERFUSION_WORDS)
            )
            score = scores.get(spec.stage) if spec.stage else None
            out[n] = (
                _not_seen(seg, "not visualised")
                if score is None
                else Cell(
                    colour_of(score), str(score), False, f"{n} {name}: {score} {meaning[score]}"
                )
            )
        elif spec.kind is MapKind.RESERVE:
            r = reserve.get(n)
            value = r.A_beta_reserve if r is not None else None
            if r is None or value is None:
                out[n] = _not_seen(seg, "no reserve (no curve or no good fit)")
            else:
                low = ReserveFlag.LOW_A_BETA_RESERVE in r.flags
                out[n] = Cell(
                    RESERVE_LOW if low else RESERVE_ADEQUATE,
                    f"{value:.1f}",
                    False,
                    f"{n} {name}: A·β reserve {value:.2f}{' (below cut-off)' if low else ''}",
                )
        else:
            if seg.response is WallMotionResponse.NOT_ASSESSABLE:
                out[n] = _not_seen(seg, "not assessable")
            else:
                fill, mark, words = RESPONSE_STYLE[seg.response]
                out[n] = Cell(palette.hex_color(fill), mark, False, f"{n} {name}: {words}")
    return out


def _change_cells(analysis: Analysis) -> dict[int, Cell]:
    from reporting.render.change_map import CHANGE_STYLE, SegmentTrend, segment_trends

    out: dict[int, Cell] = {}
    trends = segment_trends(analysis)
    for seg in analysis.segments:
        trend, words = trends.get(seg.number, (SegmentTrend.NOT_COMPARED, "no prior study"))
        if trend is SegmentTrend.NOT_COMPARED:
            out[seg.number] = _not_seen(seg, words)
        else:
            fill, mark, _ = CHANGE_STYLE[trend]
            out[seg.number] = Cell(
                palette.hex_color(fill), mark, False, f"{seg.number} {seg.name}: {words}"
            )
    return out


def caption(analysis: Analysis, spec: MapSpec) -> str:
    """One line under a map: the index it summarises."""
    if spec.kind is MapKind.CHANGE:
        from reporting.render.change_map import change_caption

        return change_caption(analysis)
    if len(spec.merged) > 1:
        names = [stage_title(s, spec.protocol) for s in spec.merged]
        stages = ", ".join(names[:-1]) + " and " + names[-1]
        words = f"{stages[:1].upper()}{stages[1:]}: all segments normal"
        return words if len(words) <= MERGED_CAPTION_CHARS else "All segments normal at every stage"
    if spec.kind is MapKind.WALL_MOTION and spec.stage is not None:
        if spec.stage not in analysis.wmsi:
            return "WMSI not computed"
        return f"WMSI {analysis.wmsi[spec.stage]:.2f} ({analysis.wmsi_scored_segments[spec.stage]} scored)"
    if spec.kind is MapKind.PERFUSION and spec.stage is not None:
        extent = analysis.perfusion.defect_extent_percent.get(spec.stage)
        return "not scored" if extent is None else f"defect extent {extent:.0f} %"
    if spec.kind is MapKind.RESERVE:
        return "stress ÷ rest, fitted curves"
    if spec.kind is MapKind.RESPONSE:
        count = analysis.conclusion.ischemic_segment_count
        return f"{count} ischaemic segment{'s' if count != 1 else ''}"
    return analysis.territory_map.name.replace("_", " ") + " map"


# --- drawing ----------------------------------------------------------------------------------


def _arc_to(path: Path, cx: float, cy: float, r: float, a0: float, a1: float) -> None:
    """Append an arc (degrees, either direction) as cubic Béziers of at most 90° each."""
    pieces = max(1, math.ceil(abs(a1 - a0) / 90 - 1e-9))
    step = (a1 - a0) / pieces
    k = 4 / 3 * math.tan(math.radians(step) / 4) * r
    for i in range(pieces):
        s0, s1 = math.radians(a0 + i * step), math.radians(a0 + (i + 1) * step)
        x0, y0 = cx + r * math.cos(s0), cy + r * math.sin(s0)
        x3, y3 = cx + r * math.cos(s1), cy + r * math.sin(s1)
        path.curveTo(
            x0 - k * math.sin(s0),
            y0 + k * math.cos(s0),
            x3 + k * math.sin(s1),
            y3 - k * math.cos(s1),
            x3,
            y3,
        )


def sector_path(sector: Sector, cx: float, cy: float, radius: float, **props: Any) -> TaggedPath:
    """One closed path per sector: outer arc, radial edge, inner arc back (or the centre)."""
    points, operators = _sector_outline(sector, cx, cy, radius)
    return TaggedPath(points=list(points), operators=list(operators), **props)


@lru_cache(maxsize=512)
def _sector_outline(
    sector: Sector, cx: float, cy: float, radius: float
) -> tuple[tuple[float, ...], tuple[int, ...]]:
    """The points and operators of a sector's path; every map of a report repeats them."""
    path = Path()
    r_out, r_in = sector.r_outer * radius, sector.r_inner * radius
    if sector.span_deg >= 360:
        path.moveTo(cx + r_out, cy)
        _arc_to(path, cx, cy, r_out, 0, 360)
    else:
        a0, a1 = math.radians(sector.start_deg), math.radians(sector.end_deg)
        path.moveTo(cx + r_out * math.cos(a0), cy + r_out * math.sin(a0))
        _arc_to(path, cx, cy, r_out, sector.start_deg, sector.end_deg)
        if r_in > 0:
            path.lineTo(cx + r_in * math.cos(a1), cy + r_in * math.sin(a1))
            _arc_to(path, cx, cy, r_in, sector.end_deg, sector.start_deg)
        else:
            path.lineTo(cx, cy)
    path.closePath()
    return tuple(path.points), tuple(path.operators)


def _edges_path(edges: list[Edge], cx: float, cy: float, radius: float, width: float) -> Path:
    """All territory boundaries of a map as one path of open subpaths."""
    path = Path(strokeColor=palette.INK, strokeWidth=width, fillColor=None, strokeLineCap=1)
    for edge in edges:
        a0 = math.radians(edge.a0)
        path.moveTo(cx + edge.r0 * radius * math.cos(a0), cy + edge.r0 * radius * math.sin(a0))
        if edge.r0 == edge.r1:
            _arc_to(path, cx, cy, edge.r0 * radius, edge.a0, edge.a1)
        else:
            path.lineTo(cx + edge.r1 * radius * math.cos(a0), cy + edge.r1 * radius * math.sin(a0))
    return path


def draw_disc(
    analysis: Analysis, spec: MapSpec, cx: float, cy: float, radius: float, fonts: Fonts = MAP_FONTS
) -> Group:
    """The sectors, marks, hatching and territory boundaries of one map, centred at (cx, cy).

    The first child is a group holding exactly one closed path per segment, in segment order; in
    SVG the group has class ``segments`` and each path ``id="segment-N"``, class ``segment`` and
    the sector's tooltip as its ``<title>``.
    """
    shown = cells(analysis, spec)
    segment_shapes = TaggedGroup(svg_class="segments")
    hatching = Path(strokeColor=palette.MUTED, strokeWidth=0.45, fillColor=None)
    marks = Group()
    font_size = max(6.0, radius * 0.17)
    for sector in sectors(analysis.segment_model):
        cell = shown[sector.number]
        segment_shapes.add(
            sector_path(
                sector,
                cx,
                cy,
                radius,
                fillColor=cell.fill,
                strokeColor=palette.RULE,
                strokeWidth=0.5,
                svg_id=f"segment-{sector.number}",
                svg_class="segment",
                svg_title=cell.tooltip,
            )
        )
        if cell.hatched:
            outline = sector_outline(sector, 4.0)
            for (x0, y0), (x1, y1) in hatch_lines(outline, HATCH_SPACING_PT / radius):
                hatching.moveTo(cx + x0 * radius, cy + y0 * radius)
                hatching.lineTo(cx + x1 * radius, cy + y1 * radius)
        lx, ly = sector.label_point()
        lx, ly = cx + lx * radius, cy + ly * radius
        size = min(font_size, _room(sector, radius) / stringWidth(cell.mark, fonts.bold, 1))
        if cell.hatched:
            # a white backing keeps the 'x' legible over the hatch lines
            marks.add(Circle(lx, ly, size * 0.55, fillColor=palette.WHITE, strokeColor=None))
        marks.add(
            String(
                lx,
                ly - size * 0.35,
                cell.mark,
                fontName=fonts.bold,
                fontSize=size,
                fillColor=palette.MUTED if cell.mark == "N" else palette.text_on(cell.fill),
                textAnchor="middle",
            )
        )
    group = Group(segment_shapes)
    if hatching.operators:
        group.add(hatching)
    territories = tuple(s.territory for s in analysis.segments)
    width = max(1.4, radius / 28)
    edges = territory_boundaries(analysis.segment_model, territories)
    if edges:
        group.add(_edges_path(edges, cx, cy, radius, width))
    group.add(Circle(cx, cy, radius, fillColor=None, strokeColor=palette.INK, strokeWidth=0.9))
    group.add(marks)
    return group


def _room(sector: Sector, radius: float) -> float:
    """Width (points) available for a sector's mark: the smaller of its chord and its depth."""
    if sector.span_deg >= 360:
        return 2 * sector.r_outer * radius * 0.8
    x, y = sector.label_point()
    r = math.hypot(x, y)
    chord = 2 * r * math.sin(math.radians(min(sector.span_deg, 180) / 2)) * radius
    depth = (sector.r_outer - sector.r_inner) * radius
    return 0.85 * min(chord, depth)


def _orientation(group: Group, cx: float, cy: float, radius: float, fonts: Fonts) -> None:
    size = max(5.0, radius * 0.12)
    gap = size * 0.5

    def word(text: str, x: float, y: float, angle: float) -> None:
        label = String(
            0 if angle else x,
            0 if angle else y,
            text,
            fontName=fonts.regular,
            fontSize=size,
            fillColor=palette.MUTED,
            textAnchor="middle",
        )
        if not angle:
            group.add(label)
            return
        holder = Group(label)
        holder.translate(x, y)
        holder.rotate(angle)
        group.add(holder)

    word("anterior", cx, cy + radius + gap, 0)
    word("inferior", cx, cy - radius - gap - size * 0.75, 0)
    word("septal", cx - radius - gap, cy, 90)
    word("lateral", cx + radius + gap, cy, -90)


def bullseye(
    analysis: Analysis,
    spec: MapSpec,
    *,
    radius: float = 60,
    legend: bool = True,
    fonts: Fonts = MAP_FONTS,
    width: float | None = None,
) -> Drawing:
    """One map as a Drawing: title, orientation words, the disc, a caption and (optionally) a legend."""
    title_size = max(7.0, radius * 0.16)
    side = max(5.0, radius * 0.12) * 1.6
    width = width or max(2 * radius + 2 * side + 4, 170 if legend else 0)
    legend_drawing = (
        draw_legend(legend_items(analysis, spec.kind), width - 8, fonts) if legend else None
    )
    legend_height = legend_drawing.height + 6 if legend_drawing else 0
    caption_size = title_size * 0.8
    below = side + caption_size + 6
    height = title_size + 4 + side + 2 * radius + below + legend_height
    drawing = Drawing(width, height)
    cx, cy = width / 2, legend_height + below + radius
    drawing.add(
        String(
            width / 2,
            height - title_size,
            spec.title,
            fontName=fonts.bold,
            fontSize=title_size,
            fillColor=palette.INK,
            textAnchor="middle",
        )
    )
    drawing.add(draw_disc(analysis, spec, cx, cy, radius, fonts))
    _orientation(drawing, cx, cy, radius, fonts)
    drawing.add(
        String(
            width / 2,
            legend_height + 3,
            caption(analysis, spec),
            fontName=fonts.regular,
            fontSize=caption_size,
            fillColor=palette.INK,
            textAnchor="middle",
        )
    )
    if legend_drawing is not None:
        legend_group = Group(*legend_drawing.contents)
        legend_group.translate(4, 0)
        drawing.add(legend_group)
    return drawing


def svg_text(drawing: Drawing, analysis: Analysis, spec: MapSpec) -> str:
    """The map as a standalone SVG document, titled with its purpose and captioned."""
    return svg_document(drawing, title=spec.title, description=caption(analysis, spec))
