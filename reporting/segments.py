"""Left-ventricular segment models, their polar geometry and coronary-territory maps.

The tables live in ``reporting/data`` (see ``data/SOURCES.md``) and are read once. A
:class:`TerritoryMap` assigns every segment of a model to exactly one of the three coronary
territories; the standard and left-dominant maps ship with the package and a lab may load its own
from a YAML file of the same shape.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from enum import IntEnum
from functools import cache
from importlib import resources
from pathlib import Path
from typing import Any

from reporting.documents import bundled_yaml, read_yaml
from reporting.errors import InputError, InputErrors
from reporting.vocabulary import Vocabulary
from reporting.wording import number_ranges


class SegmentModel(IntEnum):
    """Number of segments the left ventricle is divided into (Lang 2015, figure 3)."""

    SIXTEEN = 16
    """Six basal, six mid and four apical segments, no apical cap."""
    SEVENTEEN = 17
    """The AHA model: the sixteen segments plus the apex cap (Cerqueira 2002)."""
    EIGHTEEN = 18
    """Six segments in each of the basal, mid and apical rings, no cap."""


class Ring(Vocabulary):
    """Short-axis level of a segment."""

    BASAL = "basal"
    """Basal ring, the outer ring of the polar map."""
    MID = "mid"
    """Mid-cavity ring."""
    APICAL = "apical"
    """Apical ring."""
    APEX = "apex"
    """Apical cap, the centre disc of the 17-segment polar map."""


class Territory(Vocabulary):
    """Coronary territory."""

    LAD = "LAD"
    """Left anterior descending artery."""
    LCX = "LCx"
    """Left circumflex artery."""
    RCA = "RCA"
    """Right coronary artery."""


RING_ORDER = (Ring.BASAL, Ring.MID, Ring.APICAL, Ring.APEX)


@dataclass(frozen=True)
class Segment:
    """One segment of a model, with its polar position (degrees anticlockwise from 3 o'clock)."""

    number: int
    name: str
    ring: Ring
    center_deg: float
    span_deg: float
    default_territory: Territory
    alternative_territories: tuple[Territory, ...]

    @property
    def start_deg(self) -> float:
        return self.center_deg - self.span_deg / 2

    @property
    def end_deg(self) -> float:
        return self.center_deg + self.span_deg / 2


@cache
def _segment_table() -> dict[SegmentModel, tuple[Segment, ...]]:
    text = resources.files("reporting.data").joinpath("segments.csv").read_text(encoding="utf-8")
    table: dict[SegmentModel, list[Segment]] = {m: [] for m in SegmentModel}
    for row in csv.DictReader(io.StringIO(text)):
        alternatives = tuple(Territory(t) for t in row["alternative_territories"].split("|") if t)
        table[SegmentModel(int(row["model"]))].append(
            Segment(
                number=int(row["number"]),
                name=row["name"],
                ring=Ring(row["ring"]),
                center_deg=float(row["center_deg"]),
                span_deg=float(row["span_deg"]),
                default_territory=Territory(row["default_territory"]),
                alternative_territories=alternatives,
            )
        )
    return {m: tuple(sorted(rows, key=lambda s: s.number)) for m, rows in table.items()}


def segments_of(model: SegmentModel | int) -> tuple[Segment, ...]:
    """The segments of ``model`` in number order."""
    return _segment_table()[SegmentModel(model)]


def segment(model: SegmentModel | int, number: int) -> Segment:
    """Segment ``number`` of ``model``."""
    return segments_of(model)[number - 1]


@cache
def adjacency(model: SegmentModel | int) -> dict[int, frozenset[int]]:
    """Which segments touch which on the polar map: neighbours in a ring and across rings.

    Two sectors touch when they lie in the same ring and share an edge, or lie in neighbouring
    rings and their arcs overlap by more than a point; the apex cap touches the whole apical ring.
    """
    segs = segments_of(model)
    rings = [r for r in RING_ORDER if any(s.ring is r for s in segs)]
    touching: dict[int, set[int]] = {s.number: set() for s in segs}
    for a in segs:
        for b in segs:
            if a.number >= b.number:
                continue
            ia, ib = rings.index(a.ring), rings.index(b.ring)
            same_ring_neighbours = ia == ib and _arcs_meet(a, b)
            next_ring_overlap = abs(ia - ib) == 1 and _arcs_overlap(a, b)
            if same_ring_neighbours or next_ring_overlap:
                touching[a.number].add(b.number)
                touching[b.number].add(a.number)
    return {n: frozenset(v) for n, v in touching.items()}


def _arcs_meet(a: Segment, b: Segment) -> bool:
    gap = abs((a.center_deg - b.center_deg + 180) % 360 - 180)
    return abs(gap - (a.span_deg + b.span_deg) / 2) < 1e-9


def _arcs_overlap(a: Segment, b: Segment) -> bool:
    if a.span_deg >= 360 or b.span_deg >= 360:
        return True
    gap = abs((a.center_deg - b.center_deg + 180) % 360 - 180)
    return gap < (a.span_deg + b.span_deg) / 2 - 1e-9


@dataclass(frozen=True)
class TerritoryMap:
    """Assignment of every segment of each model to one coronary territory."""

    name: str
    title: str
    source: str
    assignment: dict[SegmentModel, dict[int, Territory]]

    def territory_of(self, model: SegmentModel | int, number: int) -> Territory:
        return self.assignment[SegmentModel(model)][number]

    def segments_in(self, model: SegmentModel | int, territory: Territory) -> list[int]:
        return sorted(n for n, t in self.assignment[SegmentModel(model)].items() if t is territory)

    def supports(self, model: SegmentModel | int) -> bool:
        return SegmentModel(model) in self.assignment


BUILT_IN_MAPS = ("standard", "left_dominant")


@cache
def built_in_map(name: str) -> TerritoryMap:
    """One of the maps shipped in ``data/territory_maps``."""
    if name not in BUILT_IN_MAPS:
        raise InputError(
            "territory_map", f"unknown map {name!r}; built-in maps: {', '.join(BUILT_IN_MAPS)}"
        )
    data = bundled_yaml("reporting.data", f"territory_maps/{name}.yaml")
    return parse_territory_map(data, location=f"territory map {name}")


def load_territory_map(path: Path) -> TerritoryMap:
    """A lab-defined map from a YAML file shaped like ``data/territory_maps/standard.yaml``."""
    data = read_yaml(path, what="territory map")
    return parse_territory_map(data, location=str(path))


def parse_territory_map(data: Any, *, location: str) -> TerritoryMap:
    """Check and build a map: every segment of each listed model in exactly one territory."""
    problems: list[InputError] = []
    if not isinstance(data, dict) or not isinstance(data.get("territories"), dict):
        raise InputError(
            location,
            "a territory map needs a 'territories' mapping of model -> territory -> segments",
        )
    assignment: dict[SegmentModel, dict[int, Territory]] = {}
    for model_key, by_territory in data["territories"].items():
        where = f"{location}: territories.{model_key}"
        try:
            model = SegmentModel(int(model_key))
        except (TypeError, ValueError):
            problems.append(InputError(where, "model must be 16, 17 or 18"))
            continue
        if not isinstance(by_territory, dict):
            problems.append(
                InputError(where, "expected a mapping of territory -> list of segments")
            )
            continue
        seen: dict[int, Territory] = {}
        for name, numbers in by_territory.items():
            try:
                territory = Territory(name)
            except ValueError:
                problems.append(InputError(f"{where}.{name}", "territory must be LAD, LCx or RCA"))
                continue
            if not isinstance(numbers, list) or not all(isinstance(n, int) for n in numbers):
                problems.append(InputError(f"{where}.{name}", "expected a list of segment numbers"))
                continue
            for n in numbers:
                if not 1 <= n <= model:
                    problems.append(
                        InputError(
                            f"{where}.{name}",
                            f"segment {n} does not exist in the {int(model)}-segment model",
                        )
                    )
                elif n in seen:
                    problems.append(
                        InputError(f"{where}.{name}", f"segment {n} is already in {seen[n]}")
                    )
                else:
                    seen[n] = territory
        missing = [n for n in range(1, model + 1) if n not in seen]
        if missing:
            problems.append(
                InputError(
                    where,
                    f"segment {missing[0]} belongs to no territory"
                    if len(missing) == 1
                    else f"segments {number_ranges(missing)} belong to no territory",
                )
            )
        assignment[model] = seen
    if problems:
        raise InputErrors(problems)
    return TerritoryMap(
        name=str(data.get("name", Path(location).stem)),
        title=str(data.get("title", data.get("name", "lab-defined map"))),
        source=str(data.get("source", "lab-defined")),
        assignment=assignment,
    )
