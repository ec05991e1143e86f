"""The live analysis answer of the entry page, shared by the folder mode and the lab (store) mode.

:func:`analysis_result` turns an analysis into what ``POST /api/analyze`` answers (the record, the
one-sentence summary, the draft narrative as text and HTML, the territory boundaries of the map
used and the lab's phrases filled from the analysis); :func:`analysis_response` sends it with the
record exactly as ``segreport analyze`` writes it.
"""

from __future__ import annotations

import logging

from fastapi.responses import JSONResponse

from reporting.phrases import PhraseLibrary, filled_library
from reporting.results import Analysis
from reporting.web import shapes
from reporting.web.api import AnalyzeResult

log = logging.getLogger(__name__)


def analysis_result(analysis: Analysis, library: PhraseLibrary) -> AnalyzeResult:
    """The page's view of ``analysis``."""
    from reporting.render import narrative_html, narrative_text
    from reporting.render.narrative import summary

    return AnalyzeResult(
        record=analysis,
        summary=summary(analysis),
        narrative_text=narrative_text(analysis),
        narrative_html=narrative_html(analysis),
        territory_boundaries=shapes.territory_boundaries_d(
            analysis.segment_model, [s.territory for s in analysis.segments]
        ),
        phrases=filled_library(library, analysis),
    )


def analysis_response(result: AnalyzeResult) -> JSONResponse:
    """``result`` as JSON, its record exactly as the command line writes it."""
    from reporting.export.record import record_dict

    answer = result.model_dump(mode="json", exclude={"record"})
    return JSONResponse(answer | {"record": record_dict(result.record)})
