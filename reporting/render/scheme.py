"""Our colour scheme for the maps and curves: how each score, response, territory and stage looks.

Built from published colour-blind-safe palettes (see :mod:`reporting.render.palette`): normal is
white everywhere; ColorBrewer sequential "YlOrBr" for abnormal wall-motion scores and "Blues" for
abnormal perfusion scores; Okabe–Ito for response categories (a dark neutral grey for fixed, so no
wall-motion meaning wears a perfusion blue), territories and the stages of fitted curves. Every category also has a
digit, a letter or (for curves) a marker shape and line style, so greyscale prints stay readable.
"""

from __future__ import annotations

from reportlab.lib.colors import Color

from reporting.model import Stage
from reporting.render import palette
from reporting.scoring import WallMotionResponse
from reporting.segments import Territory
from reporting.vocabulary import Vocabulary

# The score words live once, in wording.py; re-exported here for the maps and the entry page.
from reporting.wording import PERFUSION_WORDS as PERFUSION_WORDS
from reporting.wording import WALL_MOTION_WORDS as WALL_MOTION_WORDS


class MapKind(Vocabulary):
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
    WallMotionResponse.NORMAL: (palette.NORMAL_FILL, "N", "normal"),
    WallMotionResponse.ISCHEMIC: (palette.OKABE_ITO["vermillion"], "I", "ischaemic"),
    WallMotionResponse.BIPHASIC: (palette.OKABE_ITO["reddish_purple"], "B", "biphasic"),
    WallMotionResponse.SUSTAINED_IMPROVEMENT: (
        palette.OKABE_ITO["bluish_green"],
        "V",
        "viable, sustained improvement",
    ),
    WallMotionResponse.FIXED: (palette.SCAR_GREY, "F", "fixed"),
    WallMotionResponse.AKINETIC_TO_DYSKINETIC: (
        palette.OKABE_ITO["yellow"],
        "D",
        "akinetic to dyskinetic",
    ),
    # abnormal from its first view at low dose: never called fixed, left for the reader's review
    WallMotionResponse.ABNORMAL_AT_LOW_DOSE: (
        palette.OKABE_ITO["orange"],
        "L",
        "abnormal at first view (review)",
    ),
}
TERRITORY_FILL = {
    Territory.LAD: palette.tint(palette.OKABE_ITO["sky_blue"], 0.5),
    Territory.LCX: palette.tint(palette.OKABE_ITO["orange"], 0.45),
    Territory.RCA: palette.tint(palette.OKABE_ITO["bluish_green"], 0.55),
}


# Kinetic reserve: light where the A·β reserve is at or above the cut-off, Okabe–Ito orange below it;
# the value itself is printed in each sector.
RESERVE_ADEQUATE = palette.hex_color(palette.NORMAL_FILL)
RESERVE_LOW = palette.hex_color(palette.OKABE_ITO["orange"])


def wall_motion_fill(score: int) -> Color:
    return palette.hex_color(palette.WALL_MOTION_FILLS[score - 1])


def perfusion_fill(score: int) -> Color:
    return palette.hex_color(palette.PERFUSION_FILLS[score - 1])


# Fitted replenishment curves: one Okabe–Ito colour per stage; curves.py adds a marker shape and a
# line style per stage, so rest and peak stay apart in greyscale too.
CURVE_STAGE_COLOUR: dict[Stage, Color] = {
    Stage.REST: palette.hex_color(palette.OKABE_ITO["blue"]),
    Stage.LOW_DOSE: palette.hex_color(palette.OKABE_ITO["bluish_green"]),
    Stage.PEAK: palette.hex_color(palette.OKABE_ITO["vermillion"]),
    Stage.RECOVERY: palette.hex_color(palette.OKABE_ITO["reddish_purple"]),
}
