"""Our colour scheme for the maps and curves: how each score, response, territory and stage looks.

Built from published colour-blind-safe palettes (see :mod:`reporting.render.style`): ColorBrewer
sequential "YlOrBr" for wall-motion scores and "Blues" for perfusion scores, Okabe–Ito for response
categories, territories and the stages of fitted replenishment curves. Every category also has a
digit, a letter or (for curves) a marker shape and line style, so greyscale prints stay readable.
"""

from __future__ import annotations

from enum import StrEnum

from reportlab.lib.colors import Color

from reporting.model import Stage
from reporting.render import style
from reporting.scoring import WallMotionResponse
from reporting.segments import Territory

# The score words live once, in wording.py; re-exported here for the maps and the entry page.
from reporting.wording import PERFUSION_WORDS as PERFUSION_WORDS
from reporting.wording import WALL_MOTION_WORDS as WALL_MOTION_WORDS


class MapKind(StrEnum):
    """What a bull's-eye map shows."""

    SEGMENTS = "segments"
    """Segment numbers on their territories (the key to the other maps)."""
    WALL_MOTION = "wall_motion"
    """Wall-motion scores at one stage."""
    RESPONSE = "response"
    """Segment response from rest through stress."""
    PERFUSION = "perfusion"
    """Contrast perfusion scores at one stage."""
    RESERVE = "kinetic_reserve"
    """Replenishment A·β reserve (stress ÷ rest) per segment, from fitted time-intensity curves."""
    CHANGE = "change"
    """Change of each segment's response since the prior study (:mod:`reporting.render.change_map`)."""


# Okabe–Ito colours for the categories; a letter in each sector for greyscale print.
RESPONSE_STYLE: dict[WallMotionResponse, tuple[str, str, str]] = {
    WallMotionResponse.NORMAL: ("#ffffff", "N", "normal"),
    WallMotionResponse.ISCHEMIC: (style.OKABE_ITO["vermillion"], "I", "ischaemic"),
    WallMotionResponse.BIPHASIC: (style.OKABE_ITO["reddish_purple"], "B", "biphasic"),
    WallMotionResponse.SUSTAINED_IMPROVEMENT: (
        style.OKABE_ITO["bluish_green"],
        "V",
        "viable, sustained improvement",
    ),
    WallMotionResponse.FIXED: (style.OKABE_ITO["blue"], "F", "fixed"),
    WallMotionResponse.AKINETIC_TO_DYSKINETIC: (
        style.OKABE_ITO["yellow"],
        "D",
        "akinetic to dyskinetic",
    ),
}
TERRITORY_FILL = {
    Territory.LAD: style.tint(style.OKABE_ITO["sky_blue"], 0.5),
    Territory.LCX: style.tint(style.OKABE_ITO["orange"], 0.45),
    Territory.RCA: style.tint(style.OKABE_ITO["bluish_green"], 0.55),
}


# Kinetic reserve: light where the A·β reserve is at or above the cut-off, Okabe–Ito orange below it;
# the value itself is printed in each sector.
RESERVE_ADEQUATE = style.hex_color(style.BLUES_3[0])
RESERVE_LOW = style.hex_color(style.OKABE_ITO["orange"])


def wall_motion_fill(score: int) -> Color:
    return style.hex_color(style.YLORBR_5[score - 1])


def perfusion_fill(score: int) -> Color:
    return style.hex_color(style.BLUES_3[score - 1])


# Fitted replenishment curves: one Okabe–Ito colour per stage; curves.py adds a marker shape and a
# line style per stage, so rest and peak stay apart in greyscale too.
CURVE_STAGE_COLOUR: dict[Stage, Color] = {
    Stage.REST: style.hex_color(style.OKABE_ITO["blue"]),
    Stage.LOW_DOSE: style.hex_color(style.OKABE_ITO["bluish_green"]),
    Stage.PEAK: style.hex_color(style.OKABE_ITO["vermillion"]),
    Stage.RECOVERY: style.hex_color(style.OKABE_ITO["reddish_purple"]),
}
