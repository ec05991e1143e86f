"""Segment tables, polar geometry and territory maps against their published sources."""

from __future__ import annotations

from pathlib import Path

import pytest

from reporting.errors import InputErrors
from reporting.segments import (
    BUILT_IN_MAPS,
    Ring,
    SegmentModel,
    Territory,
    adjacency,
    built_in_map,
    load_territory_map,
    segments_of,
)

# Cerqueira MD et al., Circulation 2002;105:539-542: names of the 17 segments in number order.
CERQUEIRA_NAMES = [
    "basal anterior", "basal anteroseptal", "basal inferoseptal", "basal inferior",
    "basal inferolateral", "basal anterolateral", "mid anterior", "mid anteroseptal",
    "mid inferoseptal", "mid inferior", "mid inferolateral", "mid anterolateral",
    "apical anterior", "apical septal", "apical inferior", "apical lateral", "apex",
]  # fmt: skip

# Cerqueira 2002 (recommended assignment; the published standard default map).
CERQUEIRA_TERRITORIES = {
    Territory.LAD: [1, 2, 7, 8, 13, 14, 17],
    Territory.RCA: [3, 4, 9, 10, 15],
    Territory.LCX: [5, 6, 11, 12, 16],
}

# Polar layout (Cerqueira 2002, figure 1): 12 o'clock = 90°, anticlockwise as viewed.
CLOCK = {12: 90, 10: 150, 8: 210, 6: 270, 4: 330, 2: 30, 9: 180, 3: 0}
EXPECTED_CENTRES_17 = {
    1: 12, 2: 10, 3: 8, 4: 6, 5: 4, 6: 2,
    7: 12, 8: 10, 9: 8, 10: 6, 11: 4, 12: 2,
    13: 12, 14: 9, 15: 6, 16: 3,
}  # fmt: skip


def test_17_segment_names_follow_cerqueira() -> None:
    assert [s.name for s in segments_of(17)] == CERQUEIRA_NAMES


def test_16_segment_model_is_17_without_apex() -> None:
    # Lang RM et al., JASE 2015;28:1-39, figure 3: the 16-segment model has no apical cap.
    assert [s.name for s in segments_of(16)] == CERQUEIRA_NAMES[:16]


def test_18_segment_model_has_six_per_ring() -> None:
    # Lang 2015, figure 3: six segments in each of three rings, no cap.
    rings = [s.ring for s in segments_of(18)]
    assert rings == [Ring.BASAL] * 6 + [Ring.MID] * 6 + [Ring.APICAL] * 6
    assert [s.name for s in segments_of(18)][:12] == CERQUEIRA_NAMES[:12]


@pytest.mark.parametrize(
    "number,clock", EXPECTED_CENTRES_17.items(), ids=[f"seg{n}" for n in EXPECTED_CENTRES_17]
)
def test_polar_centres_17(number: int, clock: int) -> None:
    seg = segments_of(17)[number - 1]
    assert seg.center_deg == pytest.approx(CLOCK[clock])
    assert seg.span_deg == pytest.approx(90 if seg.ring is Ring.APICAL else 60)


def test_apex_is_the_centre_disc() -> None:
    apex = segments_of(17)[16]
    assert apex.ring is Ring.APEX and apex.span_deg == 360


@pytest.mark.parametrize("model", list(SegmentModel), ids=lambda m: f"{int(m)}seg")
def test_each_ring_covers_the_circle_once(model: SegmentModel) -> None:
    for ring in Ring:
        sectors = [s for s in segments_of(model) if s.ring is ring]
        if sectors:
            assert sum(s.span_deg for s in sectors) == pytest.approx(360)


def test_standard_map_matches_cerqueira() -> None:
    standard = built_in_map("standard")
    for territory, numbers in CERQUEIRA_TERRITORIES.items():
        assert standard.segments_in(17, territory) == numbers


def test_default_territory_column_matches_standard_map() -> None:
    standard = built_in_map("standard")
    for model in SegmentModel:
        for seg in segments_of(model):
            assert standard.territory_of(model, seg.number) is seg.default_territory


@pytest.mark.parametrize("name", BUILT_IN_MAPS)
@pytest.mark.parametrize("model", list(SegmentModel), ids=lambda m: f"{int(m)}seg")
def test_every_segment_in_exactly_one_territory(name: str, model: SegmentModel) -> None:
    m = built_in_map(name)
    listed = [n for t in Territory for n in m.segments_in(model, t)]
    assert sorted(listed) == list(range(1, int(model) + 1))


def test_left_dominant_moves_inferior_wall_to_lcx() -> None:
    # the published standard: left-dominant variant moves 3, 4, 9, 10, 15 to LCx (design choice, from memory).
    m = built_in_map("left_dominant")
    for n in (3, 4, 9, 10, 15):
        assert m.territory_of(17, n) is Territory.LCX


def test_shared_supply_marks_known_variation() -> None:
    # Pereztol-Valdés O et al., Eur Heart J 2005;26:2637; Ortiz-Pérez JT et al., JACC CVI 2008;1:282.
    seg = {s.number: s for s in segments_of(17)}
    assert Territory.LAD in seg[15].alternative_territories  # wrap-around LAD
    assert Territory.LCX in seg[4].alternative_territories  # dominance
    assert seg[1].alternative_territories == ()


def test_adjacency_is_symmetric_and_anatomical() -> None:
    touching = adjacency(17)
    for a, others in touching.items():
        for b in others:
            assert a in touching[b]
    assert touching[1] == {2, 6, 7}
    assert touching[17] == {13, 14, 15, 16}
    assert touching[7] == {
        1,
        8,
        12,
        13,
    }  # mid anterior: basal anterior above, apical anterior below
    assert touching[8] == {
        2,
        7,
        9,
        13,
        14,
    }  # mid anteroseptal spans the apical anterior/septal edge


def test_lab_map_loads_and_checks(tmp_path: Path) -> None:
    good = tmp_path / "lab.yaml"
    good.write_text(
        "name: lab\nterritories:\n  '17':\n    LAD: [1,2,7,8,13,14,15,16,17]\n    RCA: [3,4,9,10]\n    LCx: [5,6,11,12]\n"
    )
    m = load_territory_map(good)
    assert m.territory_of(17, 16) is Territory.LAD
    bad = tmp_path / "bad.yaml"
    bad.write_text("territories:\n  '17':\n    LAD: [1,2,2,18]\n    XYZ: [3]\n")
    with pytest.raises(InputErrors) as info:
        load_territory_map(bad)
    text = str(info.value)
    assert "segment 2 is already in LAD" in text
    assert "segment 18 does not exist" in text
    assert "territory must be LAD, LCx or RCA" in text
    assert "belong to no territory" in text
    one_short = tmp_path / "one_short.yaml"
    one_short.write_text(
        "territories:\n  '17':\n    LAD: [1,2,7,8,13,14,17]\n    RCA: [3,4,9,10,15]\n    LCx: [5,6,11,12]\n"
    )
    with pytest.raises(InputErrors) as info:
        load_territory_map(one_short)
    assert "segment 16 belongs to no territory" in str(info.value)
