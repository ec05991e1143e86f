"""Fitted replenishment curves as a compact grid of small panels, for the referring-doctor PDF.

One panel per segment with a curve, grouped by coronary territory under the map the analysis used:
the post-flash frames of each stage and the fitted curve y(t) = A(1 − e^(−βt)) + C (Wei K et al.,
Circulation 1998;97:473; offset C: Vogel R et al., JACC 2005;45:754), with β and R² printed small.
A panel holding a fit whose status is not 'ok' (poor fit, β at a search bound, no replenishment, bad
data) gets a hatched grey background and the status in words: such fits are left out of the reserve.

Plain reportlab shapes only (no chart widgets), so the PDF stays byte-stable in invariant mode; the
grid reads the typed Analysis and nothing else. Modules: ``blocks`` (what is shown: panels by
territory, the shared time axis), ``words`` (caption, headings, stat lines, status badges),
``panel`` (one panel's geometry and marks) and ``grid`` (the legend and the rows of panels). This
module holds the public names only.
"""

from __future__ import annotations

from reporting.render.curves.blocks import Panel, TerritoryBlock, curve_blocks, time_axis
from reporting.render.curves.grid import columns, curve_grid, grid_height, legend
from reporting.render.curves.panel import (
    FLAGGED_FILL,
    HATCH_COLOUR,
    STAGE_LOOK,
    StageLook,
    draw_panel,
    nice_top,
)
from reporting.render.curves.words import caption, stat_text, status_badge, territory_heading

__all__ = [
    "FLAGGED_FILL",
    "HATCH_COLOUR",
    "STAGE_LOOK",
    "Panel",
    "StageLook",
    "TerritoryBlock",
    "caption",
    "columns",
    "curve_blocks",
    "curve_grid",
    "draw_panel",
    "grid_height",
    "legend",
    "nice_top",
    "stat_text",
    "status_badge",
    "territory_heading",
    "time_axis",
]
