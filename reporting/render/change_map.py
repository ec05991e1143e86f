"""The change map: a bull's-eye of the segments whose wall-motion response changed since the prior study.

Drawn by :mod:`reporting.render.diagram` as the map kind ``change``, from the record's
``comparison`` (rules in :mod:`reporting.comparison`). Each sector is one of four categories, with
an Okabe–Ito colour and a mark so that greyscale prints stay readable: more ischaemic now (``+``),
less ischaemic now (``-``), another change of response (``~``), unchanged (``=``); a segment not
assessable in either study is hatched and marked ``x``.
"""

from __future__ import annotations

from reporting.comparison import ischemic_response
from reporting.render import palette
from reporting.render.scheme import RESPONSE_STYLE
from reporting.results import Analysis
from reporting.scoring import WallMotionResponse
from reporting.vocabulary import Vocabulary


class SegmentTrend(Vocabulary):
    """How one segment's response changed."""

    WORSE = "worse"
    """Ischaemic (or biphasic) now, not before."""
    BETTER = "better"
    """Ischaemic (or biphasic) before, not now."""
    OTHER = "other"
    """The response changed without entering or leaving ischaemia."""
    SAME = "same"
    """Same response in both studies."""
    NOT_COMPARED = "not_compared"
    """Not assessable in one of the studies."""


CHANGE_STYLE: dict[SegmentTrend, tuple[str, str, str]] = {
    SegmentTrend.WORSE: (palette.OKABE_ITO["vermillion"], "+", "more ischaemic than before"),
    SegmentTrend.BETTER: (palette.OKABE_ITO["bluish_green"], "-", "less ischaemic than before"),
    SegmentTrend.OTHER: (palette.OKABE_ITO["yellow"], "~", "other change of response"),
    SegmentTrend.SAME: ("#ffffff", "=", "unchanged"),
}
"""Fill (hex), mark and legend words per trend; not-compared sectors are hatched and marked x."""
NOT_COMPARED_WORDS = "not compared (not assessable then or now)"


def response_words(response: WallMotionResponse) -> str:
    """A response as the response map's legend words (``ischaemic``), ``not assessable``."""
    styled = RESPONSE_STYLE.get(response)
    return styled[2] if styled is not None else response.value.replace("_", " ")


def trend(prior: WallMotionResponse, current: WallMotionResponse) -> SegmentTrend:
    """The trend of one segment from its prior and current responses."""
    if WallMotionResponse.NOT_ASSESSABLE in (prior, current):
        return SegmentTrend.NOT_COMPARED
    if prior is current:
        return SegmentTrend.SAME
    was, now = ischemic_response(prior), ischemic_response(current)
    if now and not was:
        return SegmentTrend.WORSE
    if was and not now:
        return SegmentTrend.BETTER
    return SegmentTrend.OTHER


def segment_trends(analysis: Analysis) -> dict[int, tuple[SegmentTrend, str]]:
    """Trend and tooltip words of every segment; empty without a comparison by segment."""
    comparison = analysis.comparison
    if comparison is None:
        return {}
    changed = {c.number: c for c in comparison.changed_segments}
    out: dict[int, tuple[SegmentTrend, str]] = {}
    for seg in analysis.segments:
        change = changed.get(seg.number)
        if change is not None:
            words = f"{response_words(change.prior_response)} → {response_words(change.response)}"
            out[seg.number] = (trend(change.prior_response, change.response), words)
        elif seg.response is WallMotionResponse.NOT_ASSESSABLE:
            out[seg.number] = (SegmentTrend.NOT_COMPARED, "not assessable then or now")
        else:  # every segment whose response differs is listed
            out[seg.number] = (SegmentTrend.SAME, f"{response_words(seg.response)}, as before")
    return out


def change_caption(analysis: Analysis) -> str:
    """The line under the change map."""
    comparison = analysis.comparison
    if comparison is None:
        return "no prior study"
    count = len(comparison.changed_segments)
    return f"{count} segment{'s' if count != 1 else ''} changed"
