"""Perfusion kinetics: flash-replenishment curves, their fits and flow reserve.

After a high-MI flash under a continuous infusion, myocardial contrast intensity refills as
y(t) = A(1 − e^(−βt)) + C (Wei K et al., Circulation 1998;97:473; offset C: Vogel R et al., JACC
2005;45:754): A ∝ microvascular blood volume, β ∝ microbubble velocity, A·β ∝ myocardial blood flow.
The subpackage reads curve files (``curves``), fits every curve at once (``fit``), derives reserve,
territory reserve and visual cross-checks (``reserve``) and fits a curve file on its own
(``table``). The result models (``models``) need no numpy; the numerical parts are imported only
when one of their functions is first used, so loading the record models stays light.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from reporting.kinetics.models import (
    CrossCheckKind,
    CrossCheckNote,
    CurveProblem,
    FitStatus,
    IntensityScale,
    KineticsResult,
    ReserveFlag,
    SegmentFit,
    SegmentReserve,
    TerritoryReserve,
    UnassignedCurve,
)
from reporting.lazy import lazy_attributes

__all__ = [
    "CrossCheckKind",
    "CrossCheckNote",
    "Curve",
    "CurveProblem",
    "CurveSet",
    "FitStatus",
    "IntensityScale",
    "KineticsResult",
    "ReserveFlag",
    "SegmentFit",
    "SegmentReserve",
    "TerritoryReserve",
    "UnassignedCurve",
    "analyze_kinetics",
    "db_to_linear",
    "fit_curve_file",
    "fit_curves",
    "fits_csv_text",
    "load_curves",
    "parse_curves",
]

_LAZY = {
    "Curve": "reporting.kinetics.curves",
    "CurveSet": "reporting.kinetics.curves",
    "db_to_linear": "reporting.kinetics.curves",
    "load_curves": "reporting.kinetics.curves",
    "parse_curves": "reporting.kinetics.curves",
    "fit_curves": "reporting.kinetics.fit",
    "analyze_kinetics": "reporting.kinetics.reserve",
    "fit_curve_file": "reporting.kinetics.table",
    "fits_csv_text": "reporting.kinetics.table",
}

if TYPE_CHECKING:
    from reporting.kinetics.curves import Curve, CurveSet, db_to_linear, load_curves, parse_curves
    from reporting.kinetics.fit import fit_curves
    from reporting.kinetics.reserve import analyze_kinetics
    from reporting.kinetics.table import fit_curve_file, fits_csv_text


# numpy loads only when curves are actually read or fitted.
__getattr__ = lazy_attributes(__name__, _LAZY)
