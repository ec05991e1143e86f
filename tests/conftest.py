"""Shared test helpers: a minimal valid study as a dict, and quick ways to analyse one."""

from __future__ import annotations

import copy
from typing import Any

import pytest

from reporting.analysis import analyze
from reporting.load import study_from_data
from reporting.results import Analysis

NORMAL_17 = "111111 111111 1111 1"

BASE_STUDY: dict[str, Any] = {
    "schema_version": 1,
    "study": {"id": "T-0001", "date": "2026-10-14"},
    "patient": {"age_years": 60, "sex": "female"},
    "protocol": "dobutamine",
    "stages": {
        "rest": {"heart_rate_bpm": 70, "systolic_bp_mmhg": 120, "wall_motion": NORMAL_17},
        "peak": {"heart_rate_bpm": 150, "systolic_bp_mmhg": 150, "wall_motion": NORMAL_17},
    },
}


def study_dict(**changes: Any) -> dict[str, Any]:
    """A copy of BASE_STUDY with top-level keys replaced (``stages`` replaced whole)."""
    data = copy.deepcopy(BASE_STUDY)
    data.update(copy.deepcopy(changes))
    return data


def analysed(**changes: Any) -> Analysis:
    """Analyse BASE_STUDY with ``changes`` applied."""
    return analyze(study_from_data(study_dict(**changes)))


def stages(**scores: str | dict[int, Any]) -> dict[str, Any]:
    """Stages with wall-motion scores only, heart rates high enough to be adequate at age 60."""
    rates = {"rest": 70, "low_dose": 95, "peak": 150, "recovery": 90}
    return {
        name: {"heart_rate_bpm": rates[name], "systolic_bp_mmhg": 130, "wall_motion": s}
        for name, s in scores.items()
    }


@pytest.fixture
def base_study() -> dict[str, Any]:
    return study_dict()
