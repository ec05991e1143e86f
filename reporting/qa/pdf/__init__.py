"""The lab quality review as a one-to-two page PDF (reportlab).

Page one holds the period and the accounting of every record, the per-patient and per-territory 2×2
tables, the five measures with their Wilson intervals, a chart of sensitivity and specificity by
territory with interval whiskers, and the breakdown by reader and protocol. Page two lists the
discordant studies for case review, the studies left out of the tables, the reader-agreement figures
when given, and the cautions. Long lists are cut with a pointer to the JSON, so the document stays
within two pages.

``agreement`` builds the reader-agreement result alone as its own PDF from the same parts.

Modules: ``document`` (building, the two-page fit, writing, the free-text glyph check), ``page``
(page geometry, list limits, footer, shared text), ``page_one`` and ``page_two``. The chart is drawn
in :mod:`reporting.qa.chart`; table styles and number formats live in :mod:`reporting.qa.layout`.
Free text (reader and lab names) is escaped before it reaches paragraph markup. This module holds
the public names only.
"""

from __future__ import annotations

from reporting.qa.pdf.agreement import agreement_pdf_bytes, write_agreement_pdf
from reporting.qa.pdf.document import free_text_fields, review_pdf_bytes, write_review_pdf

__all__ = [
    "agreement_pdf_bytes",
    "free_text_fields",
    "review_pdf_bytes",
    "write_agreement_pdf",
    "write_review_pdf",
]
