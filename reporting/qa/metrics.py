"""Diagnostic accuracy from a 2×2 table: sensitivity, specificity, predictive values, accuracy.

Each measure is a :class:`Proportion` that keeps its numerator and denominator beside the value, so a
reviewer can check the arithmetic, and carries a Wilson score interval (Wilson EB, *J Am Stat Assoc*
1927;22:209–212), the interval recommended for small counts by Newcombe RG, *Stat Med*
1998;17:857–872. Definitions follow Altman DG, Bland JM, *BMJ* 1994;308:1552 (sensitivity and
specificity) and *BMJ* 1994;309:102 (predictive values). A proportion with an empty denominator has
no value and no interval rather than a made-up zero.
"""

from __future__ import annotations

import math
from statistics import NormalDist

from pydantic import BaseModel, ConfigDict, Field

CONFIDENCE_LEVEL = 0.95
"""Two-sided confidence level of every interval in the review."""


class _Result(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class Proportion(_Result):
    """A proportion with its counts and Wilson 95 % confidence interval."""

    value: float | None = Field(
        description="numerator ÷ denominator; null when the denominator is 0."
    )
    numerator: int = Field(ge=0, description="Count in the numerator.")
    denominator: int = Field(ge=0, description="Count in the denominator.")
    ci_low: float | None = Field(
        description="Lower limit of the Wilson 95 % interval; null if no data."
    )
    ci_high: float | None = Field(
        description="Upper limit of the Wilson 95 % interval; null if no data."
    )


class DiagnosticAccuracy(_Result):
    """A 2×2 table of the stress echo against the reference standard and its five measures."""

    true_positive: int = Field(ge=0, description="Echo positive, reference positive.")
    false_positive: int = Field(ge=0, description="Echo positive, reference negative.")
    false_negative: int = Field(ge=0, description="Echo negative, reference positive.")
    true_negative: int = Field(ge=0, description="Echo negative, reference negative.")
    total: int = Field(ge=0, description="All four cells together.")
    sensitivity: Proportion = Field(description="TP ÷ (TP + FN).")
    specificity: Proportion = Field(description="TN ÷ (TN + FP).")
    ppv: Proportion = Field(description="Positive predictive value, TP ÷ (TP + FP).")
    npv: Proportion = Field(description="Negative predictive value, TN ÷ (TN + FN).")
    accuracy: Proportion = Field(description="(TP + TN) ÷ total.")


def wilson_interval(
    numerator: int, denominator: int, confidence: float = CONFIDENCE_LEVEL
) -> tuple[float, float]:
    """Wilson score interval of ``numerator / denominator`` (Wilson 1927; Newcombe 1998, method 3).

    The limits are exactly 0 at 0 % and 1 at 100 %, and always inside [0, 1].
    """
    if denominator <= 0:
        raise ValueError("a confidence interval needs a denominator of at least 1")
    if not 0 <= numerator <= denominator:
        raise ValueError(f"numerator {numerator} is outside 0…{denominator}")
    if not 0 < confidence < 1:
        raise ValueError("confidence must lie strictly between 0 and 1")
    z = NormalDist().inv_cdf(1 - (1 - confidence) / 2)
    n = float(denominator)
    p = numerator / n
    z2 = z * z
    scale = 1 + z2 / n
    centre = (p + z2 / (2 * n)) / scale
    half = z * math.sqrt(p * (1 - p) / n + z2 / (4 * n * n)) / scale
    # At 0 % and 100 % the limit is exactly 0 or 1; rounding would leave it a hair off.
    low = 0.0 if numerator == 0 else max(0.0, centre - half)
    high = 1.0 if numerator == denominator else min(1.0, centre + half)
    return low, high


def proportion(numerator: int, denominator: int) -> Proportion:
    """``numerator / denominator`` with its Wilson interval (no value when the denominator is 0)."""
    if denominator == 0:
        return Proportion(value=None, numerator=numerator, denominator=0, ci_low=None, ci_high=None)
    low, high = wilson_interval(numerator, denominator)
    return Proportion(
        value=numerator / denominator,
        numerator=numerator,
        denominator=denominator,
        ci_low=low,
        ci_high=high,
    )


def diagnostic_accuracy(
    true_positive: int, false_positive: int, false_negative: int, true_negative: int
) -> DiagnosticAccuracy:
    """The five measures of a 2×2 table (Altman & Bland, BMJ 1994)."""
    tp, fp, fn, tn = true_positive, false_positive, false_negative, true_negative
    if min(tp, fp, fn, tn) < 0:
        raise ValueError("2×2 counts cannot be negative")
    total = tp + fp + fn + tn
    return DiagnosticAccuracy(
        true_positive=tp,
        false_positive=fp,
        false_negative=fn,
        true_negative=tn,
        total=total,
        sensitivity=proportion(tp, tp + fn),
        specificity=proportion(tn, tn + fp),
        ppv=proportion(tp, tp + fp),
        npv=proportion(tn, tn + fn),
        accuracy=proportion(tp + tn, total),
    )


def accuracy_of(pairs: list[tuple[bool, bool]]) -> DiagnosticAccuracy:
    """Tally ``(test positive, reference positive)`` pairs into a 2×2 table and its measures."""
    tp = sum(1 for test, ref in pairs if test and ref)
    fp = sum(1 for test, ref in pairs if test and not ref)
    fn = sum(1 for test, ref in pairs if not test and ref)
    tn = sum(1 for test, ref in pairs if not test and not ref)
    return diagnostic_accuracy(tp, fp, fn, tn)
