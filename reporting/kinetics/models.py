"""Result models of the replenishment-kinetics analysis: fits, reserve, territory reserve, notes.

These are the ``kinetics`` section of the analysis record, so every field has a description (it
becomes the published JSON Schema). They import neither numpy nor the fitting code, so the record
models can be built and validated without loading the numerical stack.
"""

from pydantic import BaseModel, ConfigDict, Field

from reporting.model import Stage
from reporting.segments import Territory
from reporting.settings import TerritoryAggregation
from reporting.vocabulary import Vocabulary

MODEL_EQUATION = "y(t) = A(1 − exp(−β t)) + C"


class _Result(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class FitStatus(Vocabulary):
    """Outcome of fitting one replenishment curve."""

    OK = "ok"
    """Fitted, R² at or above the configured minimum, β inside its bounds: used for reserve."""
    POOR_FIT = "poor_fit"
    """Fitted, but R² is below the configured minimum."""
    BETA_AT_BOUND = "beta_at_bound"
    """The best β lies on a search bound: replenishment too fast or too slow for these frames."""
    NO_REPLENISHMENT = "no_replenishment"
    """Intensity does not rise after the flash (best fit has A = 0)."""
    TOO_FEW_FRAMES = "too_few_frames"
    """Fewer post-flash frames than the configured minimum."""
    DUPLICATE_TIMES = "duplicate_times"
    """Two or more frames of the curve share a time."""
    MISSING_INTENSITY = "missing_intensity"
    """A frame's intensity is empty, NaN or infinite."""
    NEGATIVE_INTENSITY = "negative_intensity"
    """A linear intensity is below zero."""
    CONSTANT_INTENSITY = "constant_intensity"
    """Every post-flash frame has the same intensity."""
    UNKNOWN_SEGMENT = "unknown_segment"
    """The segment number does not exist in the study's segment model."""
    UNKNOWN_STAGE = "unknown_stage"
    """The stage is not one of rest, low_dose, peak, recovery."""


BAD_DATA_STATUSES = frozenset(
    {
        FitStatus.TOO_FEW_FRAMES,
        FitStatus.DUPLICATE_TIMES,
        FitStatus.MISSING_INTENSITY,
        FitStatus.NEGATIVE_INTENSITY,
        FitStatus.CONSTANT_INTENSITY,
        FitStatus.UNKNOWN_SEGMENT,
        FitStatus.UNKNOWN_STAGE,
    }
)


class IntensityScale(Vocabulary):
    """How intensities were given in the curve file."""

    LINEAR = "linear"
    """Column ``intensity``: linear, fitted as given."""
    DB = "db"
    """Column ``intensity_db``: log-compressed, converted to linear before fitting."""


class ReserveFlag(Vocabulary):
    """Why a segment or territory reserve is flagged."""

    LOW_BETA_RESERVE = "low_beta_reserve"
    """β reserve below the configured cut-off (Wei 2001: about 2.4 normal vs 1.6 with stenosis)."""
    LOW_A_BETA_RESERVE = "low_a_beta_reserve"
    """Segment A·β reserve below the configured cut-off (Moir 2005, from memory)."""
    LOW_FLOW_RESERVE = "low_flow_reserve"
    """Territory A·β reserve below the configured cut-off (Vogel 2009)."""


class CrossCheckKind(Vocabulary):
    """Disagreement between the visual perfusion score and the fitted replenishment time."""

    VISUAL_NORMAL_SLOW_REPLENISHMENT = "visual_normal_slow_replenishment"
    """Scored normal visually, but the fitted time to 90 % of plateau exceeds the usual bound."""
    VISUAL_ABNORMAL_NORMAL_REPLENISHMENT = "visual_abnormal_normal_replenishment"
    """Scored reduced or absent visually, but the fitted replenishment is within the usual bound."""


class CurveProblem(_Result):
    """One problem found with a curve, with where it is in the file."""

    reason: FitStatus = Field(description="Kind of problem (one of the bad-data statuses).")
    location: str = Field(description="File and line(s), or stage and segment, of the problem.")
    detail: str = Field(description="What is wrong, with the values.")


class SegmentFit(_Result):
    """The replenishment fit of one segment at one stage."""

    number: int = Field(description="Segment number.")
    stage: Stage = Field(description="Stage of the curve.")
    status: FitStatus = Field(description="Outcome of the fit; only 'ok' enters reserve.")
    A: float | None = Field(
        description="Plateau rise A (linear intensity units, ∝ microvascular blood volume)."
    )
    beta: float | None = Field(description="Replenishment rate β (1/s, ∝ microbubble velocity).")
    C: float | None = Field(description="Offset C at t = 0 (linear intensity units).")
    A_beta: float | None = Field(description="A × β (intensity units/s, ∝ myocardial blood flow).")
    r_squared: float | None = Field(description="Coefficient of determination of the fit.")
    time_to_90_percent_s: float | None = Field(
        description="Time to 90 % of the plateau rise, ln(10) / β (s)."
    )
    residual_sum_of_squares: float | None = Field(
        description="Sum of squared residuals of the fit (linear intensity units squared)."
    )
    frames: int = Field(description="Post-flash frames in the curve (t ≥ 0).")
    pre_flash_frames_excluded: int = Field(
        description="Frames with negative time (before the flash ended), not fitted."
    )
    time_s: list[float] = Field(description="Times of the post-flash frames (s), ascending.")
    intensity: list[float | None] = Field(
        description="Linear intensities of the post-flash frames in time order (after dB conversion); null where missing."
    )
    location: str = Field(description="File and lines the curve came from.")
    problems: list[CurveProblem] = Field(description="Bad-data problems; empty when fitted.")


class UnassignedCurve(_Result):
    """A curve whose stage or segment does not exist; not fitted."""

    stage: str = Field(description="Stage as written in the file.")
    segment: int = Field(description="Segment number as written in the file.")
    reason: FitStatus = Field(description="unknown_stage or unknown_segment.")
    location: str = Field(description="File and lines of the curve.")
    detail: str = Field(description="What is wrong.")


class SegmentReserve(_Result):
    """Stress ÷ rest kinetics of one segment."""

    number: int = Field(description="Segment number.")
    territory: Territory = Field(description="Territory of the segment under the map used.")
    stress_stage: Stage = Field(description="Stress stage divided by rest (peak).")
    beta_reserve: float | None = Field(description="β at stress ÷ β at rest.")
    A_reserve: float | None = Field(description="A at stress ÷ A at rest.")
    A_beta_reserve: float | None = Field(description="A·β at stress ÷ A·β at rest (flow reserve).")
    rest_status: FitStatus | None = Field(description="Status of the rest fit; null: no curve.")
    stress_status: FitStatus | None = Field(description="Status of the stress fit; null: no curve.")
    flags: list[ReserveFlag] = Field(description="Reserve values below the configured cut-offs.")


class TerritoryReserve(_Result):
    """Reserve of one coronary territory, from its segments with good fits at rest and stress."""

    territory: Territory = Field(description="Coronary territory.")
    aggregation: TerritoryAggregation = Field(
        description="ratio_of_means (mean stress ÷ mean rest) or mean_of_ratios (mean of segment reserves)."
    )
    segments_used: list[int] = Field(description="Segments with an 'ok' fit at rest and stress.")
    count: int = Field(description="Number of segments used.")
    segments_excluded: list[int] = Field(
        description="Territory segments left out (no curve or a fit that is not 'ok')."
    )
    beta_reserve: float | None = Field(description="Territory β reserve; null when count is 0.")
    A_reserve: float | None = Field(description="Territory A reserve; null when count is 0.")
    A_beta_reserve: float | None = Field(
        description="Territory A·β (flow) reserve; null when count is 0."
    )
    flags: list[ReserveFlag] = Field(description="Reserve values below the configured cut-offs.")


class CrossCheckNote(_Result):
    """A segment where the visual perfusion score and the fitted replenishment disagree."""

    number: int = Field(description="Segment number.")
    stage: Stage = Field(description="Stage compared (rest or peak).")
    kind: CrossCheckKind = Field(description="Direction of the disagreement.")
    perfusion_score: int = Field(
        description="Visual perfusion score (1 normal, 2 reduced, 3 absent)."
    )
    time_to_90_percent_s: float = Field(description="Fitted time to 90 % of plateau (s).")
    bound_s: float = Field(description="Usual upper bound of replenishment time at this stage (s).")
    text: str = Field(description="The note for the reader.")
    source: str = Field(description="Source of the replenishment bound.")


class Criterion(_Result):
    """A threshold the kinetics analysis applied, with its source."""

    name: str = Field(description="Setting name.")
    value: float = Field(description="Value used.")
    source: str = Field(description="Published source or practice behind the value.")


class KineticsResult(_Result):
    """Replenishment kinetics of a study: per-curve fits, reserve, territory reserve, notes."""

    model: str = Field(description="The fitted model.")
    source_file: str | None = Field(description="Name of the curve file.")
    intensity_scale: IntensityScale = Field(description="How intensities were given in the file.")
    segments: list[SegmentFit] = Field(
        description="One fit per segment and stage with a curve, in stage then segment order."
    )
    unassigned_curves: list[UnassignedCurve] = Field(
        description="Curves of unknown stages or segments, not fitted."
    )
    reserve: list[SegmentReserve] = Field(
        description="Per-segment reserve (stress ÷ rest), for segments with a curve at rest or stress."
    )
    territory_reserve: dict[Territory, TerritoryReserve] = Field(
        description="Per-territory reserve from good fits only."
    )
    cross_checks: list[CrossCheckNote] = Field(
        description="Disagreements between visual perfusion scores and fitted replenishment time."
    )
    fits_ok: int = Field(description="Fits with status 'ok'.")
    fits_total: int = Field(description="Curves of known stage and segment.")
    criteria: list[Criterion] = Field(description="Thresholds applied, with sources.")
