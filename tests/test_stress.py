"""Heart-rate targets, rate-pressure product and the Duke treadmill score."""

from __future__ import annotations

import pytest

from reporting.settings import HeartRateFormula, default_settings
from reporting.stress import (
    DukeRisk,
    age_predicted_max_hr,
    duke_risk,
    duke_treadmill_score,
    rate_pressure_product,
)


@pytest.mark.parametrize(
    "age,predicted,target", [(40, 180, 153.0), (60, 160, 136.0), (75, 145, 123.25)]
)
def test_85_percent_of_220_minus_age(age: int, predicted: float, target: float) -> None:
    # Fox 1971 via secondary sources: APMHR = 220 - age; target 85 % (Ballal RS et al., 1997).
    apmhr = age_predicted_max_hr(age, HeartRateFormula.FOX)
    assert apmhr == predicted
    assert apmhr * default_settings().target_heart_rate_fraction == pytest.approx(target)


def test_tanaka_formula() -> None:
    # Tanaka H et al., JACC 2001;37:153: 208 - 0.7 x age.
    assert age_predicted_max_hr(40, HeartRateFormula.TANAKA) == pytest.approx(180.0)
    assert age_predicted_max_hr(70, HeartRateFormula.TANAKA) == pytest.approx(159.0)


def test_rate_pressure_product() -> None:
    # Rate-pressure product = heart rate x systolic pressure (FACTS.md section 3, secondary source).
    assert rate_pressure_product(150, 160) == 24_000


# Mark DB et al., NEJM 1991;325:849: score = minutes - 5 x ST mm - 4 x angina index;
# >= +5 low, -10 to +4 intermediate, <= -11 high.
DUKE_CASES = [
    ((12.0, 0.0, 0), 12.0, DukeRisk.LOW),
    ((5.0, 0.0, 0), 5.0, DukeRisk.LOW),
    ((9.0, 1.0, 0), 4.0, DukeRisk.INTERMEDIATE),
    ((7.5, 2.0, 1), -6.5, DukeRisk.INTERMEDIATE),
    ((4.0, 2.0, 2), -14.0, DukeRisk.HIGH),
    ((3.0, 2.0, 1), -11.0, DukeRisk.HIGH),
    ((4.0, 2.0, 1), -10.0, DukeRisk.INTERMEDIATE),
]


@pytest.mark.parametrize("inputs,score,risk", DUKE_CASES, ids=[str(c[1]) for c in DUKE_CASES])
def test_duke_score_and_band(
    inputs: tuple[float, float, int], score: float, risk: DukeRisk
) -> None:
    s = default_settings()
    value = duke_treadmill_score(*inputs)
    assert value == pytest.approx(score)
    assert duke_risk(value, s.duke_low_risk_min, s.duke_high_risk_max) is risk
