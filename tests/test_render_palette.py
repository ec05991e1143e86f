"""The house colours (#13): normal is neutral, abnormal grades stand out, and the grades stay apart
for readers with a colour-vision deficiency and in greyscale print.

Oracles: colorspacious (reference library) for the colour-vision-deficiency simulation of Machado GM,
Oliveira MM & Fernandes LAF, IEEE Trans Vis Comput Graph 2009;15:1291 (severity 100 = dichromacy)
and for colour differences in CAM02-UCS (Luo MR, Cui G & Li C, Color Res Appl 2006;31:320).
Greyscale is the relative luminance of WCAG 2.x (sRGB, Rec. 709 weights).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from colorspacious import cspace_convert, deltaE

from reporting.render import palette, scheme
from reporting.scoring import WallMotionResponse

VISION = {
    "normal": None,
    "deuteranopia": "deuteranomaly",
    "protanopia": "protanomaly",
    "tritanopia": "tritanomaly",
}
# Smallest colour difference (CAM02-UCS ΔE') between two fills that must be told apart; about 10
# units is a clearly visible difference, ~1 a just-noticeable one (design choice [P]).
MIN_DELTA_E = 10.0
# Smallest relative-luminance step between neighbouring grades of a sequential scale in greyscale
# (design choice [P]): printed grey levels 0.05 apart are easy to tell apart.
MIN_LUMINANCE_STEP = 0.05


def _rgb(hex_value: str) -> np.ndarray:
    c = palette.hex_color(hex_value)
    return np.array([c.red, c.green, c.blue])


def _seen(hex_value: str, vision: str) -> np.ndarray:
    rgb = _rgb(hex_value)
    cvd = VISION[vision]
    if cvd is None:
        return rgb
    space = {"name": "sRGB1+CVD", "cvd_type": cvd, "severity": 100}
    return np.clip(cspace_convert(rgb, space, "sRGB1"), 0, 1)


def _luminance(rgb: np.ndarray) -> float:
    linear = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    return float(linear @ np.array([0.2126, 0.7152, 0.0722]))


def _hex(colour: object) -> str:
    return "#" + str(colour.hexval())[2:]  # type: ignore[attr-defined]


SCALES = {
    "wall motion": palette.WALL_MOTION_FILLS,
    "perfusion": palette.PERFUSION_FILLS,
}
CASES = [(name, vision) for name in SCALES for vision in VISION]


def test_normal_is_white_on_every_map() -> None:
    assert palette.WALL_MOTION_FILLS[0] == palette.PERFUSION_FILLS[0] == "#ffffff"
    assert _hex(scheme.wall_motion_fill(1)) == _hex(scheme.perfusion_fill(1)) == "#ffffff"
    assert scheme.RESPONSE_STYLE[WallMotionResponse.NORMAL][0] == "#ffffff"
    assert _hex(scheme.RESERVE_ADEQUATE) == "#ffffff"


@pytest.mark.parametrize(("scale", "vision"), CASES, ids=[f"{s}-{v}" for s, v in CASES])
def test_neighbouring_grades_stay_apart(scale: str, vision: str) -> None:
    fills = [_seen(f, vision) for f in SCALES[scale]]
    for (a, b), (i, j) in zip(
        itertools.pairwise(fills), itertools.pairwise(range(len(fills))), strict=True
    ):
        assert deltaE(a, b, input_space="sRGB1") >= MIN_DELTA_E, (scale, vision, i + 1, j + 1)


@pytest.mark.parametrize(("scale", "vision"), CASES, ids=[f"{s}-{v}" for s, v in CASES])
def test_grades_darken_in_greyscale_with_clear_steps(scale: str, vision: str) -> None:
    # ColorBrewer sequential schemes are ordered in lightness (Harrower & Brewer 2003)
    lum = [_luminance(_seen(f, vision)) for f in SCALES[scale]]
    steps = [a - b for a, b in itertools.pairwise(lum)]
    assert all(step >= MIN_LUMINANCE_STEP for step in steps), (scale, vision, lum)


@pytest.mark.parametrize("vision", list(VISION))
def test_response_categories_stay_apart(vision: str) -> None:
    """Each response colour differs from every other (and from the not-assessable grey); the
    letters in each sector (N, I, B, V, F, D) remain the backup in greyscale."""
    fills = {r.value: _seen(f, vision) for r, (f, _, _) in scheme.RESPONSE_STYLE.items()}
    fills["not_assessable"] = _seen(_hex(palette.NOT_SEEN_FILL), vision)
    for (a, fa), (b, fb) in itertools.combinations(fills.items(), 2):
        assert deltaE(fa, fb, input_space="sRGB1") >= MIN_DELTA_E, (vision, a, b)


def test_abnormal_grades_stand_out_from_normal() -> None:
    for fills in SCALES.values():
        for fill in fills[1:]:
            assert deltaE(_rgb(fills[0]), _rgb(fill), input_space="sRGB1") >= 2 * MIN_DELTA_E


def test_the_response_map_wears_no_perfusion_blue() -> None:
    """A wall-motion meaning (a response) never takes a colour of the perfusion scale."""
    blues = [_rgb(f) for f in palette.PERFUSION_FILLS[1:]]
    for response, (fill, _, _) in scheme.RESPONSE_STYLE.items():
        for blue in blues:
            assert deltaE(_rgb(fill), blue, input_space="sRGB1") >= 2 * MIN_DELTA_E, response
        # nor any blue hue: CIECAM02 hue angle of the blues is about 230–270°
        jch = cspace_convert(_rgb(fill), "sRGB1", "JCh")
        assert jch[1] < 10 or not 200 <= jch[2] <= 290, (response, jch)
