"""Bull's-eye geometry, colours and SVG export (reporting.render.diagram)."""

from __future__ import annotations

import itertools
import math
import xml.etree.ElementTree as ET

import pytest
import yaml
from hypothesis import given
from hypothesis import strategies as st

from reporting.analysis import analyze
from reporting.demo import demo_study_names, demo_study_text
from reporting.load import study_from_data
from reporting.model import Stage
from reporting.render import diagram, geometry, map_svgs, palette, scheme
from reporting.render.diagram import MapSpec
from reporting.render.scheme import MapKind
from reporting.results import Analysis
from reporting.segments import Ring, SegmentModel, Territory

SVG_NS = "{http://www.w3.org/2000/svg}"


def clock_deg(hour: float) -> float:
    """Clock position -> degrees anticlockwise from 3 o'clock."""
    return (90 + 30 * (12 - hour)) % 360


# the published standard (Cerqueira MD et al., Circulation 2002;105:539, fig. 1): segment 1 at 12 o'clock, then
# anticlockwise 2 at 10, 3 at 8, 4 at 6, 5 at 4, 6 at 2; the mid ring repeats the angles; the apical
# ring of the 16/17-segment models has 13 at 12, 14 at 9, 15 at 6, 16 at 3; 17 is the centre disc.
BASAL_AND_MID = {1: 12, 2: 10, 3: 8, 4: 6, 5: 4, 6: 2}
APICAL_FOUR = {13: 12, 14: 9, 15: 6, 16: 3}
# 18-segment model: six apical segments in the same positions as the basal ring
# (Lang RM et al., JASE 2015;28:1, fig. 3).
APICAL_SIX = {13: 12, 14: 10, 15: 8, 16: 6, 17: 4, 18: 2}


def expected_geometry(model: int) -> dict[int, tuple[Ring, float | None, float]]:
    """number -> (ring, clock hour or None for the centre disc, span in degrees)."""
    out: dict[int, tuple[Ring, float | None, float]] = {}
    for n, hour in BASAL_AND_MID.items():
        out[n] = (Ring.BASAL, hour, 60)
        out[n + 6] = (Ring.MID, hour, 60)
    if model == 18:
        out.update({n: (Ring.APICAL, h, 60) for n, h in APICAL_SIX.items()})
    else:
        out.update({n: (Ring.APICAL, h, 90) for n, h in APICAL_FOUR.items()})
    if model == 17:
        out[17] = (Ring.APEX, None, 360)
    return out


CASES = [(m, n) for m in (16, 17, 18) for n in expected_geometry(m)]


@pytest.mark.parametrize(("model", "number"), CASES, ids=[f"{m}-seg{n}" for m, n in CASES])
def test_sector_centre_angle_and_ring_match_facts(model: int, number: int) -> None:
    # Cerqueira et al., Circulation 2002, fig. 1; Lang et al., JASE 2015, fig. 3 (the published standard)
    ring, hour, span = expected_geometry(model)[number]
    sector = geometry.sectors(model)[number - 1]
    assert sector.number == number
    assert sector.ring is ring
    assert sector.span_deg == pytest.approx(span)
    x, y = sector.label_point()
    if hour is None:
        assert (x, y) == (0.0, 0.0)
        assert sector.r_inner == 0.0
        return
    assert sector.center_deg % 360 == pytest.approx(clock_deg(hour))
    # the label really sits at that clock position on the drawing
    drawn = math.degrees(math.atan2(y, x)) % 360
    assert min(abs(drawn - clock_deg(hour)), 360 - abs(drawn - clock_deg(hour))) < 1e-6


@pytest.mark.parametrize("model", [16, 17, 18])
def test_rings_nest_from_basal_outside_to_apex_inside(model: int) -> None:
    # the published standard: rings from outside in: basal, mid, apical, apex (Cerqueira 2002)
    by_ring: dict[Ring, set[tuple[float, float]]] = {}
    for s in geometry.sectors(model):
        by_ring.setdefault(s.ring, set()).add((s.r_inner, s.r_outer))
    order = [r for r in (Ring.BASAL, Ring.MID, Ring.APICAL, Ring.APEX) if r in by_ring]
    assert all(len(radii) == 1 for radii in by_ring.values())
    radii = [next(iter(by_ring[r])) for r in order]
    assert radii[0][1] == 1.0
    for outer, inner in itertools.pairwise(radii):
        assert inner[1] == pytest.approx(outer[0])  # rings touch, no gaps
    assert radii[-1][0] == 0.0  # the centre is filled


@pytest.mark.parametrize("model", [16, 17, 18])
def test_sectors_of_a_ring_tile_the_full_circle(model: int) -> None:
    for ring in (Ring.BASAL, Ring.MID, Ring.APICAL):
        spans = [s.span_deg for s in geometry.sectors(model) if s.ring is ring]
        assert sum(spans) == pytest.approx(360)


def test_orientation_anterior_top_septum_left_lateral_right_inferior_bottom() -> None:
    # the published standard: anterior at top, septum on the viewer's left, lateral right, inferior bottom
    sectors = {s.number: s for s in geometry.sectors(17)}
    assert sectors[1].label_point()[1] > 0.5  # basal anterior: top
    assert sectors[4].label_point()[1] < -0.5  # basal inferior: bottom
    assert sectors[14].label_point()[0] < 0  # apical septal: left
    assert sectors[16].label_point()[0] > 0  # apical lateral: right
    assert sectors[2].label_point()[0] < 0 and sectors[3].label_point()[0] < 0  # septal wall left
    assert sectors[5].label_point()[0] > 0 and sectors[6].label_point()[0] > 0  # lateral wall right


def _analysis(name: str) -> Analysis:
    return analyze(study_from_data(yaml.safe_load(demo_study_text(name))))


def _standard_17() -> tuple[Territory, ...]:
    # Default map (Cerqueira 2002 via the published standard): LAD 1,2,7,8,13,14,17; RCA 3,4,9,10,15; LCx rest
    lad = {1, 2, 7, 8, 13, 14, 17}
    rca = {3, 4, 9, 10, 15}
    return tuple(
        Territory.LAD if n in lad else Territory.RCA if n in rca else Territory.LCX
        for n in range(1, 18)
    )


def test_no_territory_boundary_inside_a_single_territory() -> None:
    same = tuple(Territory.LAD for _ in range(17))
    assert geometry.territory_boundaries(SegmentModel.SEVENTEEN, same) == []


def test_territory_boundary_between_basal_anteroseptal_and_inferoseptal() -> None:
    # 2 (LAD, 10 o'clock) meets 3 (RCA, 8 o'clock) on the radial line at 9 o'clock (180°)
    edges = geometry.territory_boundaries(SegmentModel.SEVENTEEN, _standard_17())
    radial = [e for e in edges if e.a0 == e.a1 and e.a0 % 360 == pytest.approx(180)]
    assert [(e.r0, e.r1) for e in radial] == [(0.74, 1.0), (0.48, 0.74)]
    # the apex cap (LAD) is outlined where it meets apical inferior (RCA) and apical lateral (LCx)
    cap = sorted((e.a0 % 360, e.a1 % 360) for e in edges if e.r0 == e.r1 == pytest.approx(0.22))
    assert cap == [(225.0, 315.0), (315.0, 45.0)]


def test_no_boundary_between_sectors_of_one_territory() -> None:
    edges = geometry.territory_boundaries(SegmentModel.SEVENTEEN, _standard_17())
    # 1 and 7 are both LAD: nothing on the basal/mid circle over 60–120°
    assert not [e for e in edges if e.r0 == e.r1 == pytest.approx(0.74) and 60 <= e.a0 % 360 < 120]


def test_demo_maps_cover_every_purpose() -> None:
    analysis = _analysis("DEMO-0002.yaml")
    keys = [s.key for s in diagram.map_specs(analysis)]
    assert keys == [
        "wall_motion-rest",
        "wall_motion-low_dose",
        "wall_motion-peak",
        "segments",
        "response",
        "perfusion-rest",
        "perfusion-peak",
    ]


def test_not_visualised_segments_are_hatched_and_marked_x() -> None:
    analysis = _analysis("DEMO-0005.yaml")  # 5, 6 and 12 not visualised at peak
    cells = diagram.cells(analysis, MapSpec(MapKind.WALL_MOTION, Stage.PEAK))
    unseen = sorted(n for n, c in cells.items() if c.hatched)
    assert unseen == [5, 6, 12]
    assert all(cells[n].mark == "x" for n in unseen)
    assert all(cells[n].mark == "1" for n in cells if n not in unseen)
    response = diagram.cells(analysis, MapSpec(MapKind.RESPONSE))
    assert sorted(n for n, c in response.items() if c.hatched) == [5, 6, 12]


def test_every_sector_carries_a_mark_for_greyscale_print() -> None:
    for name in demo_study_names():
        analysis = _analysis(name)
        for spec in diagram.map_specs(analysis):
            assert all(cell.mark for cell in diagram.cells(analysis, spec).values()), spec.key


def _luminance(hex_value: str) -> float:
    c = palette.hex_color(hex_value)
    return float(0.2126 * c.red + 0.7152 * c.green + 0.0722 * c.blue)


def test_score_colours_darken_with_the_score_so_greyscale_keeps_the_order() -> None:
    # ColorBrewer sequential schemes (Harrower & Brewer 2003) are ordered in lightness
    for colours in (palette.WALL_MOTION_FILLS, palette.PERFUSION_FILLS):
        lum = [_luminance(c) for c in colours]
        assert lum == sorted(lum, reverse=True)


def test_response_categories_have_distinct_letters_and_colours() -> None:
    letters = [mark for _, mark, _ in scheme.RESPONSE_STYLE.values()]
    fills = [fill for fill, _, _ in scheme.RESPONSE_STYLE.values()]
    assert len(set(letters)) == len(letters)
    assert len(set(fills)) == len(fills)


@given(
    start=st.floats(min_value=0, max_value=359),
    span=st.sampled_from([60.0, 90.0]),
    inner=st.sampled_from([0.0, 0.22, 0.48]),
)
def test_hatch_lines_stay_inside_their_sector(start: float, span: float, inner: float) -> None:
    sector = geometry.Sector(1, Ring.MID, start + span / 2, span, inner, inner + 0.26)
    outline = geometry.sector_outline(sector, 4.0)
    for (x0, y0), (x1, y1) in geometry.hatch_lines(outline, 0.05):
        mx, my = (x0 + x1) / 2, (y0 + y1) / 2
        r = math.hypot(mx, my)
        assert sector.r_inner - 1e-6 <= r <= sector.r_outer + 1e-6
        offset = (math.degrees(math.atan2(my, mx)) - sector.center_deg + 180) % 360 - 180
        assert abs(offset) <= span / 2 + 1e-6


@pytest.mark.parametrize("name", ["DEMO-0002.yaml", "DEMO-0005.yaml"])
def test_svg_parses_and_has_one_shape_per_segment(name: str) -> None:
    analysis = _analysis(name)
    count = len(analysis.segments)
    for key, text in map_svgs(analysis).items():
        root = ET.fromstring(text.encode("utf-8"))
        assert root.tag == f"{SVG_NS}svg", key
        shapes = [e for e in root.iter() if e.get("class") == "segment"]
        assert len(shapes) == count, key
        assert {e.tag for e in shapes} == {f"{SVG_NS}path"}
        assert [e.get("id") for e in shapes] == [f"segment-{n}" for n in range(1, count + 1)]
        assert all(e.find(f"{SVG_NS}title") is not None for e in shapes)
        # the group of segment shapes holds one closed shape per segment and nothing else
        (group,) = [g for g in root.iter(f"{SVG_NS}g") if g.get("class") == "segments"]
        assert len(list(group)) == count


@pytest.mark.parametrize("model", [16, 18])
def test_svg_for_16_and_18_segment_models(model: int) -> None:
    data = yaml.safe_load(demo_study_text("DEMO-0004.yaml"))
    data["segment_model"] = model
    for stage in data["stages"].values():
        stage["wall_motion"] = "1" * model
    analysis = analyze(study_from_data(data))
    for text in map_svgs(analysis).values():
        root = ET.fromstring(text.encode("utf-8"))
        assert len([e for e in root.iter() if e.get("class") == "segment"]) == model


def test_every_wall_motion_response_has_a_style() -> None:
    # A response without a style made the PDF fail with a KeyError (found by the batch benchmark).
    from reporting.scoring import WallMotionResponse

    missing = [r for r in WallMotionResponse if r is not WallMotionResponse.NOT_ASSESSABLE]
    missing = [r for r in missing if r not in scheme.RESPONSE_STYLE]
    assert missing == []


def test_a_segment_abnormal_from_low_dose_is_drawn_and_reported() -> None:
    from conftest import analysed, stages

    from reporting.render import pdf_bytes
    from reporting.scoring import WallMotionResponse

    # segment 1 not seen at rest, hypokinetic from low dose on: flagged, never "fixed" (common practice)
    analysis = analysed(
        stages=stages(
            rest="x11111 111111 1111 1",
            low_dose="211111 111111 1111 1",
            peak="211111 111111 1111 1",
        )
    )
    assert analysis.segments[0].response is WallMotionResponse.ABNORMAL_AT_LOW_DOSE
    svgs = map_svgs(analysis)
    assert "abnormal at first view" in svgs["response"]
    assert pdf_bytes(analysis).startswith(b"%PDF")
