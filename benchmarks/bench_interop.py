"""Time the hospital exports of one study: DICOM SR + Encapsulated PDF, HL7 ORU^R01, FHIR Bundle.

Run ``python benchmarks/bench_interop.py [STUDY.yaml ...]`` (default: every demo study). Per study,
after imports, with the PDF already made and validation (dciodvfy, hl7apy, fhir.resources) left out,
it prints the median of several runs after one warm-up of:

* the SR and the Encapsulated PDF built and encoded as DICOM files (``dicom_objects`` +
  ``dicom_bytes`` for both), target ≤ 50 ms;
* the HL7 v2.5.1 message text (``oru_message``), target ≤ 10 ms;
* the FHIR transaction Bundle as JSON text (``bundle_json``), target ≤ 10 ms.

Each export is measured for a signed (final) release with a full order, the heaviest case. This is
a script, not a test: timings depend on the machine. Wall-clock time is measured by default; on a
machine shared with other work, ``--cpu`` measures this process's CPU time instead, which the other
work disturbs far less.
"""

from __future__ import annotations

import datetime as dt
import os
import statistics
import sys
import time
from collections.abc import Callable
from pathlib import Path

import yaml

from reporting.analysis import analyze
from reporting.demo import demo_study_names
from reporting.export.fhir import bundle_json
from reporting.interop.dicom_files import dicom_bytes, dicom_objects
from reporting.interop.hl7 import oru_message
from reporting.interop.release import Release, ReportState, Signer
from reporting.load import study_from_data
from reporting.render import pdf_bytes
from reporting.results import Analysis

RUNS = 15
CLOCK = time.process_time if "--cpu" in sys.argv else time.perf_counter
TARGETS_MS = {"dicom": 50.0, "hl7": 10.0, "fhir": 10.0}
DEMO = Path(__file__).resolve().parent.parent / "reporting" / "data" / "demo"
ORDER = {
    "accession_number": "ACC-BENCH-0001",
    "placer_order_number": "PL-1",
    "filler_order_number": "FL-1",
    "study_instance_uid": "2.25.1234567890",
    "performing": {"name": "Invented Sonographer", "id": "S-1"},
    "interpreting": {"name": "Invented Reader", "id": "S-2"},
}
AT = dt.datetime(2026, 10, 16, 9, 30, tzinfo=dt.UTC)
RELEASE = Release(
    state=ReportState.FINAL,
    signer=Signer(name="Invented Reader", signed_at=AT, meaning="approval", organization="Lab"),
)


def median_ms(action: Callable[[], object], runs: int = RUNS) -> float:
    """Median CPU milliseconds of ``action`` (``CLOCK`` time: see the module docstring)."""
    action()  # warm-up
    times = []
    for _ in range(runs):
        start = CLOCK()
        action()
        times.append(CLOCK() - start)
    return 1000 * statistics.median(times)


def measure(analysis: Analysis, pdf: bytes) -> dict[str, float]:
    """Median milliseconds of each export of ``analysis``."""

    def dicom() -> None:
        objects = dicom_objects(analysis, pdf, RELEASE, at=AT)
        dicom_bytes(objects.sr)
        dicom_bytes(objects.pdf)

    return {
        "dicom": median_ms(dicom),
        "hl7": median_ms(lambda: oru_message(analysis, pdf, RELEASE, at=AT)),
        "fhir": median_ms(lambda: bundle_json(analysis, pdf=pdf, release=RELEASE)),
    }


def main(paths: list[Path]) -> int:
    worst = dict.fromkeys(TARGETS_MS, 0.0)
    print(f"clock: {CLOCK.__name__}; load average {os.getloadavg()[0]:.1f}")
    print(f"{'study':<12} {'DICOM ms':>9} {'HL7 ms':>8} {'FHIR ms':>8}  PDF bytes")
    for path in paths:
        data = yaml.safe_load(path.read_text(encoding="utf-8"))
        data["order"] = ORDER
        data.pop("perfusion_curves", None)  # curves are read relative to the file: not needed here
        analysis = analyze(study_from_data(data))
        pdf = pdf_bytes(analysis)

        figures = measure(analysis, pdf)
        for name, value in figures.items():
            worst[name] = max(worst[name], value)
        print(
            f"{analysis.study.id:<12} {figures['dicom']:9.1f} {figures['hl7']:8.1f} "
            f"{figures['fhir']:8.1f}  {len(pdf)}"
        )
    verdict = {name: worst[name] <= TARGETS_MS[name] for name in TARGETS_MS}
    for name, ok in verdict.items():
        print(
            f"worst {name}: {worst[name]:.1f} ms (target ≤ {TARGETS_MS[name]:.0f} ms) {'ok' if ok else 'OVER'}"
        )
    return 0 if all(verdict.values()) else 1


if __name__ == "__main__":
    args = [Path(a) for a in sys.argv[1:] if a != "--cpu"] or [
        DEMO / name for name in demo_study_names()
    ]
    sys.exit(main(args))
