"""Rendering an :class:`~reporting.results.Analysis`: bull's-eye maps, narrative and the PDF.

:func:`write_report` writes the whole set for one study into a folder, named after the study id:
``<id>.record.json``, one ``<id>.<purpose>.svg`` per map and ``<id>.pdf``. Either every file is
written or none (files written before a failure are removed). The names below load on first use,
so importing a light part of this package (the narrative words, which every analysis uses for its
computed findings) does not load reportlab, jinja2 or the drawings.
"""

from __future__ import annotations

from reporting.lazy import lazy_attributes

_LAZY = {
    "PAPERS": "reporting.render.pdf",
    "pdf_bytes": "reporting.render.pdf",
    "narrative_html": "reporting.render.narrative",
    "narrative_text": "reporting.render.narrative",
    "map_svgs": "reporting.render.report",
    "report_paths": "reporting.render.report",
    "write_report": "reporting.render.report",
}

__all__ = sorted(_LAZY)

__getattr__ = lazy_attributes(__name__, _LAZY)
