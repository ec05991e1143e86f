"""Invented studies, orders and releases shared by the interoperability tests (#16)."""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any

import yaml

from reporting.analysis import analyze
from reporting.interop.release import Predecessor, Release, ReportState, Signer
from reporting.load import study_from_data
from reporting.results import Analysis

DEMO = Path(__file__).parent.parent / "reporting" / "data" / "demo"
AT = dt.datetime(2026, 10, 16, 9, 30, tzinfo=dt.UTC)
ORDER: dict[str, Any] = {
    "accession_number": "ACC-2026-0042",
    "placer_order_number": "PL-778812",
    "filler_order_number": "FL-20261015-07",
    "study_instance_uid": "2.25.118110325340312839216612408471326812345",
    "performing": {"name": "M. Delacroix-Ng", "id": "S-0451"},
    "interpreting": {"name": "Dr Ines Halvorsen", "id": "S-0102"},
}
SIGNER = Signer(
    name="Dr Ines Halvorsen",
    id="S-0102",
    signed_at=AT,
    meaning="approval",
    organization="Larkspur Valley Heart Clinic",
)
UNSIGNED = Release.unsigned()
FINAL = Release(state=ReportState.FINAL, signer=SIGNER)
CORRECTED = Release(
    state=ReportState.CORRECTED,
    version=2,
    signer=SIGNER,
    predecessor=Predecessor(
        version=1,
        reason="segment 7 rescored",
        sr_sop_instance_uid="2.25.301",
        sr_series_instance_uid="2.25.302",
    ),
)
PDF = b"%PDF-1.7\n% invented bytes for tests | ^ ~ \\ &\n%%EOF"  # odd length on purpose


def demo_data(name: str = "DEMO-0002") -> dict[str, Any]:
    data: dict[str, Any] = yaml.safe_load((DEMO / f"{name}.yaml").read_text())
    return data


def ordered(name: str = "DEMO-0002", **order_changes: Any) -> Analysis:
    """A demo study with the invented order attached (``None`` values drop an order field)."""
    data = demo_data(name)
    order = {k: v for k, v in {**ORDER, **order_changes}.items() if v is not None}
    data["order"] = order
    return analyze(study_from_data(data))


def with_data(data: dict[str, Any]) -> Analysis:
    return analyze(study_from_data(data))


def perfusion_not_seen() -> Analysis:
    """DEMO-0002 with the apical cap (segment 17) not visualised for perfusion at peak."""
    data = demo_data("DEMO-0002")
    data["stages"]["peak"]["perfusion"] = "111111 221111 2311 x"
    data["order"] = dict(ORDER)
    return analyze(study_from_data(data))
