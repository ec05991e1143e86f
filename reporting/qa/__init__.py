"""Lab quality review: stress-echo results against angiography, and agreement between readers.

Public API::

    from reporting.qa import run_review, review_json, write_review_pdf, run_agreement, agreement_json
    review = run_review("records/", "ANGIO.csv", stenosis_percent=70)
    agreement = run_agreement("reader_a/", "reader_b/")
    write_review_pdf(review, "qa.pdf", agreement=agreement)
    write_agreement_pdf(agreement, "agreement.pdf")

Modules: ``records`` (reading records back), ``angio`` (the angiography CSV), ``metrics`` (2×2
measures with Wilson intervals), ``review`` (the review itself), ``kappa`` (Cohen's kappa and the
Landis & Koch bands), ``agreement`` (two readers), ``status`` (viability-only and non-diagnostic studies, the
non-diagnostic rate), ``pdf`` (the quality PDF and the agreement PDF). The PDF module is
imported lazily because it pulls in reportlab.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from reporting.lazy import lazy_attributes

__all__ = [
    "Agreement",
    "Angiography",
    "DiagnosticAccuracy",
    "Proportion",
    "QualityReview",
    "Vessel",
    "agreement_json",
    "agreement_pdf_bytes",
    "build_agreement",
    "build_review",
    "cohen_kappa",
    "landis_koch",
    "read_angiography",
    "read_records",
    "review_json",
    "review_pdf_bytes",
    "run_agreement",
    "run_review",
    "wilson_interval",
    "write_agreement_pdf",
    "write_review_pdf",
]

_LAZY = {
    "Agreement": "reporting.qa.agreement",
    "agreement_json": "reporting.qa.agreement",
    "build_agreement": "reporting.qa.agreement",
    "run_agreement": "reporting.qa.agreement",
    "Angiography": "reporting.qa.angio",
    "Vessel": "reporting.qa.angio",
    "read_angiography": "reporting.qa.angio",
    "cohen_kappa": "reporting.qa.kappa",
    "landis_koch": "reporting.qa.kappa",
    "DiagnosticAccuracy": "reporting.qa.metrics",
    "Proportion": "reporting.qa.metrics",
    "wilson_interval": "reporting.qa.metrics",
    "review_pdf_bytes": "reporting.qa.pdf",
    "agreement_pdf_bytes": "reporting.qa.pdf",
    "write_agreement_pdf": "reporting.qa.pdf",
    "write_review_pdf": "reporting.qa.pdf",
    "read_records": "reporting.qa.records",
    "QualityReview": "reporting.qa.review",
    "build_review": "reporting.qa.review",
    "review_json": "reporting.qa.review",
    "run_review": "reporting.qa.review",
}

if TYPE_CHECKING:
    from reporting.qa.agreement import Agreement, agreement_json, build_agreement, run_agreement
    from reporting.qa.angio import Angiography, Vessel, read_angiography
    from reporting.qa.kappa import cohen_kappa, landis_koch
    from reporting.qa.metrics import DiagnosticAccuracy, Proportion, wilson_interval
    from reporting.qa.pdf import (
        agreement_pdf_bytes,
        review_pdf_bytes,
        write_agreement_pdf,
        write_review_pdf,
    )
    from reporting.qa.records import read_records
    from reporting.qa.review import QualityReview, build_review, review_json, run_review


__getattr__ = lazy_attributes(__name__, _LAZY)
