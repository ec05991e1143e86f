"""Cohen's kappa, unweighted and weighted, and the Landis & Koch descriptive bands.

Kappa compares the agreement two readers reach with the agreement expected by chance from their own
marginal frequencies: κ = 1 − Σ w·observed ÷ Σ w·expected, with disagreement weights w. Unweighted
kappa (Cohen J, *Educ Psychol Meas* 1960;20:37–46) counts every disagreement alike; weighted kappa
(Cohen J, *Psychol Bull* 1968;70:213–220) gives ordinal scores partial credit, with linear weights
|i − j| or quadratic weights (i − j)² (Fleiss JL, Cohen J, *Educ Psychol Meas* 1973;33:613–619).
Distances are positions on the full category list given, so a wall-motion scale 1–4 keeps its spacing
even when a score is never used. Kappa is undefined (``None``) when chance alone predicts perfect
agreement, as when both readers give every segment the same score.
"""

from __future__ import annotations

from collections.abc import Hashable, Sequence
from typing import TypeVar

from reporting.vocabulary import Vocabulary

C = TypeVar("C", bound=Hashable)


class Weighting(Vocabulary):
    """Disagreement weights of kappa."""

    NONE = "none"
    """Every disagreement weighs 1 (Cohen 1960)."""
    LINEAR = "linear"
    """Weight |i − j|: one grade apart costs half as much as two (Cohen 1968)."""
    QUADRATIC = "quadratic"
    """Weight (i − j)²: close to the intraclass correlation (Fleiss & Cohen 1973)."""


class AgreementLabel(Vocabulary):
    """Landis & Koch descriptive band of a kappa (Landis JR, Koch GG, *Biometrics* 1977;33:159–174)."""

    POOR = "poor"
    """Kappa below 0."""
    SLIGHT = "slight"
    """0.00–0.20."""
    FAIR = "fair"
    """0.21–0.40."""
    MODERATE = "moderate"
    """0.41–0.60."""
    SUBSTANTIAL = "substantial"
    """0.61–0.80."""
    ALMOST_PERFECT = "almost_perfect"
    """0.81–1.00."""


LANDIS_KOCH_BANDS: tuple[tuple[float, AgreementLabel], ...] = (
    (0.81, AgreementLabel.ALMOST_PERFECT),
    (0.61, AgreementLabel.SUBSTANTIAL),
    (0.41, AgreementLabel.MODERATE),
    (0.21, AgreementLabel.FAIR),
    (0.0, AgreementLabel.SLIGHT),
)
"""Lower limit of each band, highest first (Landis & Koch 1977); below 0 is poor."""


def landis_koch(kappa: float) -> AgreementLabel:
    """The Landis & Koch band of ``kappa``."""
    for lower, label in LANDIS_KOCH_BANDS:
        if kappa >= lower:
            return label
    return AgreementLabel.POOR


def cohen_kappa(
    pairs: Sequence[tuple[C, C]],
    categories: Sequence[C],
    weighting: Weighting = Weighting.NONE,
) -> float | None:
    """Kappa of reader A's and reader B's ratings ``pairs`` over the ordered ``categories``.

    Returns ``None`` when there are no pairs or when expected disagreement is zero.
    """
    position = {c: i for i, c in enumerate(categories)}
    if len(position) != len(categories):
        raise ValueError("categories must be distinct")
    unknown = {c for pair in pairs for c in pair if c not in position}
    if unknown:
        raise ValueError(f"ratings outside the categories: {sorted(map(str, unknown))}")
    n = len(pairs)
    if n == 0:
        return None
    k = len(categories)
    observed = [[0.0] * k for _ in range(k)]
    for a, b in pairs:
        observed[position[a]][position[b]] += 1.0
    rows = [sum(observed[i]) for i in range(k)]
    cols = [sum(observed[i][j] for i in range(k)) for j in range(k)]
    observed_disagreement = 0.0
    expected_disagreement = 0.0
    for i in range(k):
        for j in range(k):
            w = _weight(i, j, weighting)
            if w:
                observed_disagreement += w * observed[i][j] / n
                expected_disagreement += w * rows[i] * cols[j] / (n * n)
    if expected_disagreement <= 0.0:
        return None
    return 1.0 - observed_disagreement / expected_disagreement


def proportion_agreeing(pairs: Sequence[tuple[C, C]]) -> float | None:
    """Share of pairs where both readers gave the same rating (``None`` without pairs)."""
    if not pairs:
        return None
    return sum(1 for a, b in pairs if a == b) / len(pairs)


def _weight(i: int, j: int, weighting: Weighting) -> float:
    if weighting is Weighting.LINEAR:
        return float(abs(i - j))
    if weighting is Weighting.QUADRATIC:
        return float((i - j) ** 2)
    return 0.0 if i == j else 1.0
