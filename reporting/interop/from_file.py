"""File mode: a study file in, the inputs of every export out (analysis, PDF, release, settings).

A study file is never signed, so what it releases is preliminary and unverified
(:meth:`Release.unsigned`), whatever its ``report_status`` says; signed versions come from the
report store, which calls the same exporters with its own :class:`Release`.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from reporting.analysis import analyze_file
from reporting.interop.release import Release
from reporting.results import Analysis
from reporting.settings import Settings, load_settings


@dataclass(frozen=True)
class Released:
    """What an exporter needs besides its own options."""

    analysis: Analysis
    pdf: bytes
    release: Release
    settings: Settings


def release_from_file(
    path: Path, *, settings_path: Path | None = None, territory_map: str | None = None
) -> Released:
    """Load and analyse the study at ``path`` and make its PDF, as the ``report`` command does."""
    from reporting.render import pdf_bytes  # reportlab loads only for the exports

    analysis = analyze_file(path, settings_path=settings_path, territory_map=territory_map)
    return Released(
        analysis=analysis,
        pdf=pdf_bytes(analysis),
        release=Release.unsigned(),
        settings=load_settings(settings_path),
    )
