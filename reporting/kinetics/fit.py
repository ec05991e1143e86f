"""Fitting y(t) = A(1 − e^(−βt)) + C to many replenishment curves at once.

For a fixed β the model is linear in A and C, so both follow from least squares in closed form and
only β needs a search: the residual sum of squares is profiled over β (variable projection, Golub
and Pereyra, SIAM J Numer Anal 1973). The search is bounded and one-dimensional — a log-spaced grid
over the configured β range, a few zoom steps that re-grid the bracket around each curve's best
point, then a parabolic step — and every step runs on all curves at once as numpy arrays (curves of
different lengths are padded and masked), with a fixed number of steps and no per-curve loop. A is kept ≥ 0: when the
unconstrained best A for some β is negative, the constrained optimum is A = 0 with C the mean, so a
curve that never rises ends with A = 0 and is reported as showing no replenishment.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TypedDict

import numpy as np
import numpy.typing as npt

from reporting.kinetics.curves import Curve, CurveSet
from reporting.kinetics.models import FitStatus, SegmentFit, UnassignedCurve
from reporting.model import Stage
from reporting.settings import Settings

FloatArray = npt.NDArray[np.float64]
BoolArray = npt.NDArray[np.bool_]

# Numerical-method constants, not clinical thresholds.
GRID_POINTS = 40  # log-spaced β values: ~15 % apart over the default 0.05–10 /s range
ZOOM_POINTS = 8  # points inside the bracket per zoom step: the bracket shrinks 4.5-fold
ZOOM_STEPS = 4  # zoom steps before the closing parabolic step (bracket ~3e-4 in ln β)
AT_BOUND_TOLERANCE = 1e-4  # ln β this close to a bound counts as "at the bound"
_TINY = 1e-300


@dataclass(frozen=True)
class FitArrays:
    """Fitted parameters of ``m`` curves, one entry per curve."""

    A: FloatArray
    beta: FloatArray
    C: FloatArray
    rss: FloatArray
    tss: FloatArray
    r_squared: FloatArray
    at_bound: BoolArray
    replenishes: BoolArray


def pad_curves(
    curves: Sequence[tuple[npt.ArrayLike, npt.ArrayLike]],
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Stack ``(time_s, intensity)`` pairs of any lengths into padded arrays and a 0/1 mask."""
    longest = max((len(np.atleast_1d(t)) for t, _ in curves), default=0)
    t = np.zeros((len(curves), longest))
    y = np.zeros((len(curves), longest))
    w = np.zeros((len(curves), longest))
    for i, (ti, yi) in enumerate(curves):
        k = len(np.atleast_1d(ti))
        t[i, :k], y[i, :k], w[i, :k] = ti, yi, 1.0
    return t, y, w


class _Profile:
    """Least-squares A and C for given β, for every curve (arrays of shape (m, n)).

    Sums use the centred decay e^(−βt) − mean rather than 1 − e^(−βt) minus its mean: the decay
    keeps full relative precision both when βt is large at every frame (all values near 0) and
    when it is small (values near 1, differences ≈ β Δt), where raw sums of squares cancel.
    """

    def __init__(self, t: FloatArray, y: FloatArray, w: FloatArray) -> None:
        self.w = w
        self.w_col = w[:, :, None]
        self.neg_t = -(t * w)
        self.n = w.sum(axis=1)
        self.ybar = (w * y).sum(axis=1) / self.n
        self.yc = w * (y - self.ybar[:, None])  # centred data, zero in the padding
        self.yc_col = self.yc[:, :, None]
        self.tss = (self.yc * self.yc).sum(axis=1)

    def _centred_decay(self, log_beta: FloatArray) -> tuple[FloatArray, FloatArray]:
        """e^(−βt) minus its mean over real frames, zero in the padding (m, k, n); and the mean."""
        # In-place steps: fresh (m, k, n) temporaries cost more than the arithmetic.
        decay = np.multiply(np.exp(log_beta)[:, :, None], self.neg_t[:, None, :])
        np.exp(decay, out=decay)
        mean = np.matmul(decay, self.w_col)[:, :, 0] / self.n[:, None]
        np.subtract(decay, mean[:, :, None], out=decay)
        np.multiply(decay, self.w[:, None, :], out=decay)
        return decay, mean

    def gain(self, log_beta: FloatArray) -> FloatArray:
        """TSS − RSS of the best A ≥ 0 and C at each ln β (shape (m, k)); larger is better."""
        ec, _ = self._centred_decay(log_beta)
        sxx = np.einsum("mkn,mkn->mk", ec, ec)
        sxy = -np.matmul(ec, self.yc_col)[:, :, 0]  # the basis 1 − e^(−βt) centred is −ec
        rising = (sxy > 0) & (sxx > _TINY)
        result: FloatArray = np.where(rising, sxy * sxy / np.where(rising, sxx, 1.0), 0.0)
        return result

    def parameters(self, beta: FloatArray) -> tuple[FloatArray, FloatArray, FloatArray]:
        """A (≥ 0), C and the residual sum of squares at one β per curve (shape (m,))."""
        ec, mean = self._centred_decay(np.log(beta)[:, None])
        ec, mean = ec[:, 0, :], mean[:, 0]
        sxx = (ec * ec).sum(axis=1)
        sxy = -(ec * self.yc).sum(axis=1)
        a = np.where(sxx > _TINY, sxy / np.where(sxx > _TINY, sxx, 1.0), 0.0)
        a = np.maximum(a, 0.0)
        c = self.ybar - a * (1.0 - mean)
        resid = self.yc + a[:, None] * ec  # y − (A(1 − e^(−βt)) + C), written with centred terms
        return a, c, (resid * resid).sum(axis=1)


def fit_replenishment(
    t: FloatArray,
    y: FloatArray,
    w: FloatArray | None = None,
    *,
    beta_min: float,
    beta_max: float,
) -> FitArrays:
    """Fit every row of ``t``/``y`` (shape (m, n), ``w`` a 0/1 mask of real frames).

    Search in u = ln β: a grid over [ln β_min, ln β_max]; then, per curve, a few zoom steps that
    re-grid the bracket around the best point; then the vertex of the parabola through the best
    point and its two neighbours, kept only where it does better.
    """
    t = np.asarray(t, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    w = np.ones_like(t) if w is None else np.asarray(w, dtype=np.float64)
    m = t.shape[0]
    if m == 0:
        empty = np.zeros(0)
        flags = np.zeros(0, dtype=np.bool_)
        return FitArrays(empty, empty, empty, empty, empty, empty, flags, flags)
    profile = _Profile(t, y, w)
    lo, hi = math.log(beta_min), math.log(beta_max)
    rows = np.arange(m)

    u = np.broadcast_to(np.linspace(lo, hi, GRID_POINTS), (m, GRID_POINTS))
    g = profile.gain(u)
    offsets = np.linspace(-1.0, 1.0, ZOOM_POINTS + 2)  # bracket ends and the points between
    for _ in range(ZOOM_STEPS):
        best = np.argmax(g, axis=1)
        left = u[rows, np.maximum(best - 1, 0)]
        right = u[rows, np.minimum(best + 1, u.shape[1] - 1)]
        centre, half = (left + right) / 2, (right - left) / 2
        u = centre[:, None] + half[:, None] * offsets
        g = profile.gain(u)
    best = np.clip(np.argmax(g, axis=1), 1, u.shape[1] - 2)
    u0, u1, u2 = u[rows, best - 1], u[rows, best], u[rows, best + 1]
    g0, g1, g2 = g[rows, best - 1], g[rows, best], g[rows, best + 1]
    curvature = g0 - 2 * g1 + g2
    concave = curvature < 0
    step = np.where(concave, (g0 - g2) / np.where(concave, 2 * curvature, 1.0), 0.0)
    vertex = np.clip(u1 + step * (u1 - u0), u0, u2)
    g_vertex = profile.gain(vertex[:, None])[:, 0]
    top = np.argmax(g, axis=1)
    u_best = np.where(g_vertex > g[rows, top], vertex, u[rows, top])

    beta = np.exp(u_best)
    amp, offset, rss = profile.parameters(beta)
    tss = profile.tss
    r_squared = np.where(tss > 0, 1.0 - rss / np.where(tss > 0, tss, 1.0), 0.0)
    at_bound = (u_best - lo < AT_BOUND_TOLERANCE) | (hi - u_best < AT_BOUND_TOLERANCE)
    return FitArrays(
        A=amp,
        beta=beta,
        C=offset,
        rss=rss,
        tss=tss,
        r_squared=r_squared,
        at_bound=at_bound,
        replenishes=amp > 0,
    )


def fit_curves(
    curves: Sequence[tuple[npt.ArrayLike, npt.ArrayLike]], *, beta_min: float, beta_max: float
) -> FitArrays:
    """Fit ``(time_s, intensity)`` pairs of any lengths (see :func:`fit_replenishment`)."""
    t, y, w = pad_curves(curves)
    return fit_replenishment(t, y, w, beta_min=beta_min, beta_max=beta_max)


def classify(
    replenishes: bool, r_squared: float, at_bound: bool, *, min_r_squared: float
) -> FitStatus:
    """Status of a fitted curve."""
    if not replenishes:
        return FitStatus.NO_REPLENISHMENT
    if r_squared < min_r_squared:
        return FitStatus.POOR_FIT
    if at_bound:
        return FitStatus.BETA_AT_BOUND
    return FitStatus.OK


def fit_curve_set(
    curve_set: CurveSet, settings: Settings
) -> tuple[list[SegmentFit], list[UnassignedCurve]]:
    """Fit every fittable curve; curves of unknown stage or segment come back as unassigned."""
    assigned: list[Curve] = []
    unassigned: list[UnassignedCurve] = []
    for curve in curve_set.curves:
        unknown = [
            p
            for p in curve.problems
            if p.reason in (FitStatus.UNKNOWN_STAGE, FitStatus.UNKNOWN_SEGMENT)
        ]
        if unknown:
            unassigned.append(
                UnassignedCurve(
                    stage=curve.stage_label,
                    segment=curve.segment,
                    reason=unknown[0].reason,
                    location=curve.location,
                    detail="; ".join(p.detail for p in unknown),
                )
            )
        else:
            assigned.append(curve)
    fittable = [c for c in assigned if c.fittable]
    arrays = (
        fit_curves(
            [(c.time_s, c.intensity) for c in fittable],
            beta_min=settings.kinetics_beta_min_per_s,
            beta_max=settings.kinetics_beta_max_per_s,
        )
        if fittable
        else None
    )
    index = {id(c): i for i, c in enumerate(fittable)}
    fits = [
        _segment_fit(c, arrays, index.get(id(c)), settings.kinetics_min_r_squared) for c in assigned
    ]
    return fits, unassigned


class _CurveFields(TypedDict):
    """The fields of a SegmentFit that come from its curve, fitted or not."""

    number: int
    stage: Stage
    frames: int
    pre_flash_frames_excluded: int
    time_s: list[float]
    intensity: list[float | None]
    location: str


def _segment_fit(
    curve: Curve, arrays: FitArrays | None, i: int | None, min_r_squared: float
) -> SegmentFit:
    stage = curve.stage
    assert stage is not None  # unknown stages were set aside by the caller
    common: _CurveFields = {
        "number": curve.segment,
        "stage": stage,
        "frames": int(curve.time_s.size),
        "pre_flash_frames_excluded": curve.pre_flash_frames,
        "time_s": [float(v) for v in curve.time_s],
        "intensity": [float(v) if math.isfinite(v) else None for v in curve.intensity],
        "location": curve.location,
    }
    if arrays is None or i is None:
        return SegmentFit(
            **common,
            status=curve.problems[0].reason,
            A=None,
            beta=None,
            C=None,
            A_beta=None,
            r_squared=None,
            time_to_90_percent_s=None,
            residual_sum_of_squares=None,
            problems=list(curve.problems),
        )
    replenishes = bool(arrays.replenishes[i])
    r_squared = float(arrays.r_squared[i])
    status = classify(replenishes, r_squared, bool(arrays.at_bound[i]), min_r_squared=min_r_squared)
    amp, beta = float(arrays.A[i]), float(arrays.beta[i])
    return SegmentFit(
        **common,
        status=status,
        A=amp,
        beta=beta if replenishes else None,
        C=float(arrays.C[i]),
        A_beta=amp * beta if replenishes else None,
        r_squared=r_squared,
        time_to_90_percent_s=math.log(10.0) / beta if replenishes else None,
        residual_sum_of_squares=float(arrays.rss[i]),
        problems=[],
    )
