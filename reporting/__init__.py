"""segreport: stress-echocardiography segment scores to a computed analysis record and report.

Public API::

    from reporting import load_study, analyze, analyze_file, record_json
    analysis = analyze_file("study.yaml")

Decision support for qualified clinicians; computed values need physician review.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from reporting.lazy import lazy_attributes

__version__ = "0.1.0"

__all__ = [
    "Analysis",
    "InputError",
    "InputErrors",
    "ReportingError",
    "Settings",
    "Study",
    "__version__",
    "analyze",
    "analyze_file",
    "confirm_impression",
    "findings_sha256",
    "impression_is_stale",
    "load_settings",
    "load_study",
    "record_json",
]

_LAZY = {
    "Analysis": "reporting.results",
    "InputError": "reporting.errors",
    "InputErrors": "reporting.errors",
    "ReportingError": "reporting.errors",
    "Settings": "reporting.settings",
    "Study": "reporting.model",
    "analyze": "reporting.analysis",
    "analyze_file": "reporting.analysis",
    "confirm_impression": "reporting.impression",
    "findings_sha256": "reporting.impression",
    "impression_is_stale": "reporting.impression",
    "load_settings": "reporting.settings",
    "load_study": "reporting.load",
    "record_json": "reporting.export.record",
}

if TYPE_CHECKING:
    from reporting.analysis import analyze, analyze_file
    from reporting.errors import InputError, InputErrors, ReportingError
    from reporting.export.record import record_json
    from reporting.impression import confirm_impression, findings_sha256, impression_is_stale
    from reporting.load import load_study
    from reporting.model import Study
    from reporting.results import Analysis
    from reporting.settings import Settings, load_settings


# Imports are lazy so that `segreport --help` stays fast.
__getattr__ = lazy_attributes(__name__, _LAZY)
