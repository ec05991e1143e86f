"""The house palette: the colours shared by the maps, the curves and both PDFs.

Built from two published colour-blind-safe palettes: the sequential ColorBrewer schemes of Harrower M
& Brewer CA, Cartographic Journal 2003;40:27–37 ("YlOrBr" for wall motion, "Blues" for perfusion) and
the qualitative Okabe–Ito palette (Okabe M & Ito K, "Color Universal Design", 2002/2008) for
categories. Normal findings are neutral (white); every sector also carries a digit, a letter or a
hatch, so a map stays readable when printed in greyscale. What each score, response and territory
looks like is decided in :mod:`reporting.render.scheme`.
"""

from __future__ import annotations

from reportlab.lib import colors
from reportlab.lib.colors import Color

NORMAL_FILL = "#ffffff"
"""Normal is neutral: white, so only abnormal grades catch the eye."""
# Wall-motion grades 2–5: ColorBrewer "YlOrBr" colours (Harrower & Brewer 2003; 2 and 3 from the
# 5-class scheme, 4 and 5 from the 7-class one, which keeps neighbouring grades apart under
# deuteranopia too): sequential, so greyscale keeps the order.
YLORBR_ABNORMAL = ("#fed98e", "#fe9929", "#cc4c02", "#8c2d04")
WALL_MOTION_FILLS = (NORMAL_FILL, *YLORBR_ABNORMAL)
"""Fill of wall-motion score 1–5 (index score − 1)."""
# Perfusion grades 2–3: ColorBrewer "Blues", 3 classes, its two darker (Harrower & Brewer 2003).
BLUES_ABNORMAL = ("#9ecae1", "#3182bd")
PERFUSION_FILLS = (NORMAL_FILL, *BLUES_ABNORMAL)
"""Fill of perfusion score 1–3 (index score − 1)."""
SCAR_GREY = "#595959"
"""Fixed (scar) response: a dark neutral, so no wall-motion meaning borrows the perfusion blues."""
# Okabe–Ito qualitative palette (Okabe & Ito 2008), colour-blind safe.
OKABE_ITO = {
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
    "black": "#000000",
}

INK = colors.HexColor("#1a1a1a")
MUTED = colors.HexColor("#5f5f5f")
RULE = colors.HexColor("#9a9a9a")
PANEL = colors.HexColor("#f2f2f2")
NOT_SEEN_FILL = colors.HexColor("#d4d4d4")
WHITE = colors.white


def hex_color(value: str) -> Color:
    return colors.HexColor(value)


def tint(value: str, amount: float) -> Color:
    """``value`` mixed with white; ``amount`` 0 keeps the colour, 1 gives white."""
    base = colors.HexColor(value)
    return Color(
        base.red + (1 - base.red) * amount,
        base.green + (1 - base.green) * amount,
        base.blue + (1 - base.blue) * amount,
    )


def text_on(fill: Color) -> Color:
    """Black or white, whichever reads better on ``fill`` (relative luminance, WCAG 2.x)."""

    def channel(c: float) -> float:
        return c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4

    luminance = (
        0.2126 * channel(fill.red) + 0.7152 * channel(fill.green) + 0.0722 * channel(fill.blue)
    )
    # Contrast with black (L + 0.05) / 0.05 against white 1.05 / (L + 0.05): black wins above ~0.18.
    return INK if luminance > 0.18 else WHITE
