"""The lab page's live analysis and the reader's phrase routes: folder mode's answers (shared
code in :mod:`reporting.web.analysing` and :mod:`reporting.web.reader`), with the analysis the
store will sign: the stored curve and map files of the study, and the comparison with the
patient's prior signed study when the store has one. Included in
:data:`reporting.web.lab.studies.router`.
"""

from __future__ import annotations

import logging

from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse
from starlette.concurrency import run_in_threadpool

from reporting.load import study_from_data
from reporting.model import Study
from reporting.phrases import built_in_library
from reporting.results import Analysis
from reporting.settings import Settings
from reporting.store import content, history, versions
from reporting.store.engine import Database
from reporting.web.analysing import analysis_response, analysis_result
from reporting.web.api import REFUSED, AnalyzeResult, study_body
from reporting.web.bodies import parse_body
from reporting.web.lab.context import lab_of
from reporting.web.reader import (
    ConfirmedImpression,
    PhraseListing,
    confirmed_impression,
    phrase_listing,
)

log = logging.getLogger(__name__)

router = APIRouter()
STUDY = "study"


def analysed(db: Database, study: Study, settings: Settings) -> Analysis:
    """The study's analysis as the store will sign it: with the lab's ``settings``, the curve and
    map files of its stored latest version (if the study is stored and still names them), compared
    with the patient's prior signed study when the store has one."""
    files: dict[str, str] = {}
    named = {n for n in (study.perfusion_curves, study.territory_map) if n is not None}
    with db.read() as session:
        # a study naming no file (the usual case) needs no stored version: no lookup, no parse
        known = versions.study_row(session, study.study.id) if named else None
        if known is not None:
            latest = versions.latest(session, known)
            stored_files = content.parse(bytes(latest.content)).files
            files = {k: v for k, v in stored_files.items() if k in named}
        stored = content.build(study, files)
        prior = history.prior_of(session, stored)
    return history.compared(content.analyse(stored, final=False, settings=settings), prior)


@router.post(
    "/api/analyze",
    response_model=AnalyzeResult,
    responses=REFUSED,
    openapi_extra=study_body(),
    summary="Validate and analyse a study (as folder mode), compared with the prior signed study",
)
async def analyze_study(request: Request) -> JSONResponse:
    study = study_from_data(parse_body(await request.body(), STUDY), source=STUDY)
    lab = lab_of(request)
    library = lab.phrases if lab.phrases is not None else built_in_library()
    result = await run_in_threadpool(
        lambda: analysis_result(analysed(lab.db, study, lab.settings), library)
    )
    return analysis_response(result)


@router.get("/api/phrases", response_model=PhraseListing, summary="The lab's phrase library")
def phrases(request: Request) -> PhraseListing:
    lab = lab_of(request)
    if lab.phrases is None:
        return phrase_listing(built_in_library(), "built-in")
    return phrase_listing(lab.phrases, lab.phrases_source)


@router.post(
    "/api/impression/confirm",
    response_model=ConfirmedImpression,
    responses=REFUSED,
    openapi_extra=study_body(),
    summary="Confirm the reader's impression against the findings computed now",
)
async def confirm(request: Request) -> ConfirmedImpression:
    data = parse_body(await request.body(), STUDY)
    lab = lab_of(request)
    return await run_in_threadpool(
        lambda: confirmed_impression(data, lambda s: analysed(lab.db, s, lab.settings))
    )
