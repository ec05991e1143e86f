"""Heart-rate targets, rate-pressure product and the Duke treadmill score."""

from __future__ import annotations

from fractions import Fraction

import pytest

from reporting.settings import HeartRateFormula, default_settings
from reporting.stress import (
    DukeRisk,
    age_predicted_max_hr,
    assess_adequacy,
    duke_risk,
    duke_treadmill_score,
    exercise_hypotension,
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
    # Rate-pressure product = heart rate x systolic pressure (common practice).
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


def _exact_band(score: Fraction) -> DukeRisk:
    # Mark 1991's bands on the exact rational score: >= +5 low, <= -11 high.
    return DukeRisk.LOW if score >= 5 else DukeRisk.HIGH if score <= -11 else DukeRisk.INTERMEDIATE


def test_duke_band_at_its_edges_matches_exact_arithmetic() -> None:
    # Oracle: Python's fractions.Fraction (exact rationals). Durations to 0.1 min and ST deviation
    # to 0.01 mm: 4.4 - 5 x 2.28 - 4 = -11 exactly is high risk, 9.2 - 5 x 0.84 = +5 is low, though
    # binary floating point gives -10.999999999999998 and 4.999999999999999.
    s = default_settings()
    wrong = []
    for tenths in range(0, 211):
        for hundredths in range(0, 401):
            for angina in (0, 1, 2):
                exact = Fraction(tenths, 10) - 5 * Fraction(hundredths, 100) - 4 * angina
                if exact not in (-11, 5):
                    continue
                score = duke_treadmill_score(tenths / 10, hundredths / 100, angina)
                band = duke_risk(score, s.duke_low_risk_min, s.duke_high_risk_max)
                if score != exact or band is not _exact_band(exact):
                    wrong.append((tenths / 10, hundredths / 100, angina, score))
    assert wrong == []


# Exercise-induced hypotension (Gibbons RJ et al., ACC/AHA exercise testing guideline update 2002,
# from memory): peak systolic pressure below rest, or a fall > 10 mmHg from the highest exercise
# pressure; not graded with one exercise pressure above rest.
#   rest, exercise pressures (last = peak) -> hypotensive?
HYPOTENSION_CASES = [
    (130, [160, 180], False, "rising pressure"),
    (130, [125], True, "single exercise pressure below rest"),
    (130, [140], False, "single exercise pressure above rest: not graded"),
    (130, [170, 159], True, "fall of 11 mmHg from the highest exercise pressure"),
    (130, [170, 160], False, "fall of exactly 10 mmHg is not more than 10"),
    (None, [170, 150], True, "no rest pressure, fall of 20 during exercise"),
    (130, [], False, "no exercise pressure"),
]


@pytest.mark.parametrize(
    "rest,during,hypotensive",
    [c[:3] for c in HYPOTENSION_CASES],
    ids=[c[3] for c in HYPOTENSION_CASES],
)
def test_exercise_hypotension(rest: int | None, during: list[int], hypotensive: bool) -> None:
    fall = default_settings().exercise_sbp_fall_high_risk_above_mmhg
    assert fall == 10  # Gibbons 2002 (from memory): > 10 mmHg
    assert (exercise_hypotension(rest, during, fall) is not None) is hypotensive


# Adequacy: 85 % of 220 - age (Fox 1971 [S]; a negative study below it is non-diagnostic:
# Ballal RS et al., 1997); vasodilator stress is not rate-dependent (common practice).
#   rate-dependent, stress imaged, peak, age, peak HR -> adequate, note
ADEQUACY_CASES = [
    (True, True, True, 60, 136, True, "Peak heart rate 136 bpm reached the target of 136 bpm (85 % of the age-predicted maximum 160 bpm)."),
    (True, True, True, 60, 135, False, "Peak heart rate 135 bpm did not reach the target of 136 bpm (85 % of the age-predicted maximum 160 bpm)."),
    (True, False, False, 60, None, False, "No stress images were recorded."),
    (False, False, False, 60, None, False, "No stress images were recorded."),
    (False, True, True, 60, 80, True, "Vasodilator stress: the heart-rate target does not apply."),
    (True, True, False, 60, 150, False, "No peak stage was recorded, so adequacy is not established."),
    (True, True, True, None, 150, False, "Age unknown: the target heart rate cannot be computed, so adequacy is not established."),
]  # fmt: skip


@pytest.mark.parametrize(
    "rate,imaged,peak,age,hr,adequate,note",
    ADEQUACY_CASES,
    ids=[
        "reached",
        "below",
        "no stress",
        "vasodilator no stress",
        "vasodilator",
        "no peak",
        "no age",
    ],
)
def test_assess_adequacy(
    rate: bool,
    imaged: bool,
    peak: bool,
    age: int | None,
    hr: int | None,
    adequate: bool,
    note: str,
) -> None:
    verdict = assess_adequacy(
        rate_dependent=rate,
        stress_imaged=imaged,
        peak_recorded=peak,
        age_years=age,
        peak_hr_bpm=hr,
        predicted_bpm=None if age is None else age_predicted_max_hr(age, HeartRateFormula.FOX),
        target_fraction=0.85,
    )
    assert (verdict.adequate, verdict.note) == (adequate, note)
