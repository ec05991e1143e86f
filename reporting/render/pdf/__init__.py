"""The referring-doctor PDF: header, answer, bull's-eye maps, tables, narrative, curves, sign-off.

Modules: ``document`` (:func:`pdf_bytes`: page template, metadata, the free-text glyph check),
``page`` (paper sizes, margins, footer and page numbers), ``styles`` (paragraph styles and escaped
paragraphs), ``header`` (lab, patient and study grid, answer box) and ``story`` (the body in reading
order). The data tables are in :mod:`reporting.render.tables`. This module holds the public names
only.
"""

from __future__ import annotations

from reporting.render.pdf.document import free_text_fields, pdf_bytes
from reporting.render.pdf.header import report_title
from reporting.render.pdf.page import PAPERS

__all__ = ["PAPERS", "free_text_fields", "pdf_bytes", "report_title"]
