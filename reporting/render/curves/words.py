"""The words of the curve grid: the caption under the heading, each territory's heading line, the
β and R² line of a fit and the status badge of a fit that is not 'ok'.

Stage names come from :func:`reporting.wording.stage_words`. Where a font has no Greek glyphs (the
built-in fonts of the maps), β is written as ``beta``.
"""

from __future__ import annotations

from reporting.kinetics.models import FitStatus, ReserveFlag, SegmentFit
from reporting.render import safe_text
from reporting.render.curves.blocks import TerritoryBlock
from reporting.render.fonts import MAP_FONTS, Fonts
from reporting.results import Analysis
from reporting.wording import number_list, stage_words

STATUS_WORDS = {
    FitStatus.OK: "ok",
    FitStatus.POOR_FIT: "poor fit",
    FitStatus.BETA_AT_BOUND: "β at bound",
    FitStatus.NO_REPLENISHMENT: "no replenishment",
    FitStatus.TOO_FEW_FRAMES: "too few frames",
    FitStatus.DUPLICATE_TIMES: "duplicate times",
    FitStatus.MISSING_INTENSITY: "missing intensity",
    FitStatus.NEGATIVE_INTENSITY: "negative intensity",
    FitStatus.CONSTANT_INTENSITY: "constant intensity",
    FitStatus.UNKNOWN_SEGMENT: "unknown segment",
    FitStatus.UNKNOWN_STAGE: "unknown stage",
}


def caption(analysis: Analysis, fonts: Fonts = MAP_FONTS) -> str:
    """The sentence under the section heading: what the panels show."""
    beta = glyph("β", "beta", fonts.regular)
    return (
        "One panel per segment with a curve, grouped by territory: the frames after the flash "
        f"(markers) and the fitted y(t) = A(1 − e^(−{beta}t)) + C (Wei K et al., Circulation 1998), "
        f"with {beta} (1/s) and R² of each fit. Time in seconds from the flash; intensity in linear "
        "units, each panel on its own scale."
    )


def territory_heading(block: TerritoryBlock, fonts: Fonts = MAP_FONTS) -> str:
    """``segments 1, 2, 7 · territory A·β reserve 1.50 (below cut-off) from 6 segments``."""
    beta = glyph("β", "beta", fonts.regular)
    numbers = number_list(p.segment.number for p in block.panels)
    parts = [f"segment{'s' if len(block.panels) != 1 else ''} {numbers}"]
    r = block.reserve
    if r is not None and r.count and r.A_beta_reserve is not None:
        low = " (below cut-off)" if ReserveFlag.LOW_FLOW_RESERVE in r.flags else ""
        plural = "s" if r.count != 1 else ""
        parts.append(
            f"territory A·{beta} reserve {r.A_beta_reserve:.2f}{low} from {r.count} segment{plural}"
        )
    else:
        parts.append("no territory reserve (no segment with good fits at rest and stress)")
    if block.without_curves:
        parts.append(f"no curve for {number_list(block.without_curves)}")
    return " · ".join(parts)


def stat_text(fit: SegmentFit, fonts: Fonts = MAP_FONTS) -> str:
    """``peak β 2.16 R² 0.97``; ``peak: not fitted`` (the badge in the plot says why)."""
    stage = stage_words(fit.stage)
    if fit.beta is None or fit.r_squared is None:
        return f"{stage}: not fitted"
    beta = glyph("β", "beta", fonts.regular)
    return f"{stage} {beta} {fit.beta:.2f}  R² {fit.r_squared:.2f}"


def status_badge(fit: SegmentFit, fonts: Fonts = MAP_FONTS) -> str:
    """``peak: poor fit``: the words shown on a panel whose fit is not 'ok'."""
    words = STATUS_WORDS[fit.status]
    if fit.status is FitStatus.BETA_AT_BOUND:
        words = words.replace("β", glyph("β", "beta", fonts.bold))
    return f"{stage_words(fit.stage)}: {words}"


def glyph(text: str, fallback: str, font: str) -> str:
    """``text`` when the font has its glyphs, else the plain ``fallback``."""
    return text if safe_text.printable(text, font) == text else fallback
