"""The lab page's study routes: worklist, open, save (with conflicts), sign, amend, addendum,
signed PDF, history, assignment, live analysis and the reader's phrase routes.

Who may call each route is decided in one place (:data:`reporting.web.lab.access.ACCESS`), before
a route runs; a route learns who called from :func:`~reporting.web.lab.access.caller`. The store
does the work (:mod:`reporting.store.worklist`, :mod:`~reporting.store.saving`,
:mod:`~reporting.store.signing`); these routes parse, call and answer. Every change names the
version it started from (``If-Match`` with the version's ``ETag``): without it 428, when the study
changed meanwhile 412 with what the other person changed, field by field
(:mod:`reporting.store.conflicts`), on a signed study 409. Signing, amending and adding an
addendum ask for the signer's password again (21 CFR 11.200); a wrong one counts towards the
lockout like a failed sign-in. Nothing is written on any refusal.
"""

from __future__ import annotations

import datetime as dt
import logging
from collections.abc import Callable
from typing import Annotated, Any

from fastapi import APIRouter, Query, Request
from fastapi.responses import JSONResponse, Response
from starlette.concurrency import run_in_threadpool

from reporting.model import SafeId
from reporting.store import (
    history,
    saving,
    signing,
    versions,
    worklist,
)
from reporting.store.canonical import Origin
from reporting.store.engine import Database
from reporting.store.errors import NotFound
from reporting.store.users import Person
from reporting.store.worklist import WorklistStatus
from reporting.web.api import REFUSED
from reporting.web.bodies import parse_body
from reporting.web.lab import live
from reporting.web.lab import study_views as views
from reporting.web.lab.access import Caller, CallerDep
from reporting.web.lab.context import lab_of
from reporting.web.lab.study_shapes import (
    AddendumRequest,
    AmendRequest,
    AssignmentAnswer,
    AssignmentRequest,
    NewStudy,
    SignedAnswer,
    SignRequest,
    StudyConflict,
    StudyView,
    Worklist,
    WorklistRow,
)

log = logging.getLogger(__name__)

router = APIRouter()
router.routes.extend(live.router.routes)  # flat, so the access check sees each path
WEB = Origin.WEB
# --- worklist -------------------------------------------------------------------------------


@router.get("/api/worklist", response_model=Worklist, responses=REFUSED, summary="The worklist")
def get_worklist(
    request: Request,
    status: WorklistStatus | None = None,
    reader: Annotated[str | None, Query(max_length=64)] = None,
    patient: Annotated[str | None, Query(max_length=64)] = None,
    date_from: dt.date | None = None,
    date_to: dt.date | None = None,
    limit: Annotated[int, Query(ge=1, le=worklist.MAX_LIMIT)] = worklist.DEFAULT_LIMIT,
    offset: Annotated[int, Query(ge=0)] = 0,
) -> Worklist:
    total, rows = worklist.listing(
        views.database_of(request),
        worklist.Query(status, reader, patient, date_from, date_to, limit, offset),
    )
    return Worklist(
        total=total,
        rows=[WorklistRow(**{k: getattr(r, k) for k in WorklistRow.model_fields}) for r in rows],
    )


# --- studies --------------------------------------------------------------------------------


@router.post(
    "/api/studies",
    response_model=StudyView,
    status_code=201,
    responses=REFUSED,
    summary="Store a new study (version 1); 409 when its id exists",
)
async def create_study(request: Request, who: CallerDep) -> JSONResponse:
    body = views.validated(NewStudy, parse_body(await request.body(), views.REQUEST))
    study = views.study_of(body.study)
    db, settings = views.database_of(request), lab_of(request).settings

    def work() -> StudyView:
        return views.view(db, saving.create(db, study, who.person, origin=WEB), settings)

    return views.answer(await run_in_threadpool(work), 201)


@router.get(
    "/api/studies/{study_id}",
    response_model=StudyView,
    responses=REFUSED,
    summary="Open a study's latest version (its ETag for If-Match)",
)
def open_study(study_id: SafeId, request: Request) -> JSONResponse:
    db = views.database_of(request)
    with views.found():
        return views.answer(views.view(db, saving.read(db, study_id), lab_of(request).settings))


@router.get(
    "/api/studies/{study_id}/versions/{number}",
    response_model=StudyView,
    responses=REFUSED,
    summary="Open one version of a study",
)
def open_version(study_id: SafeId, number: int, request: Request) -> JSONResponse:
    db = views.database_of(request)
    with views.found():
        return views.answer(
            views.view(db, saving.read(db, study_id, number), lab_of(request).settings)
        )


@router.put(
    "/api/studies/{study_id}",
    response_model=StudyView,
    responses=REFUSED
    | {
        409: {"description": "The latest version is signed: amend it or add an addendum."},
        412: {"model": StudyConflict, "description": "Changed since; the changes field by field."},
        428: {"model": StudyConflict, "description": "No If-Match."},
    },
    summary="Save a new preliminary version (If-Match: the version the changes start from)",
)
async def save_study(study_id: SafeId, request: Request, who: CallerDep) -> Response:
    body = views.validated(NewStudy, parse_body(await request.body(), views.REQUEST))
    study = views.study_of(body.study)
    mine = saving.study_json(study)
    if_match = request.headers.get("if-match")
    db, settings = views.database_of(request), lab_of(request).settings

    def work() -> Response:
        if if_match is None:
            with views.found():
                current = saving.read(db, study_id)
            return views.conflict(
                428, f"study {study_id}: {views.IF_MATCH_NEEDED}", study_id, current=current
            )
        try:
            with views.found():
                opened, _ = saving.save(
                    db, study_id, study, who.person, if_match=if_match, origin=WEB
                )
        except saving.Stale as exc:
            detail = f"{exc.location}: {exc.problem} (412 Precondition Failed)"
            return views.conflict(
                412, detail, study_id, base=exc.base, current=exc.current, mine=mine
            )
        return views.answer(views.view(db, opened, settings))

    return await run_in_threadpool(work)


def _signing(
    request: Request,
    who: Caller,
    study_id: str,
    *,
    password: str,
    on_signed: bool,
    act: Callable[[Database, Person, int], signing.Signed],
    mine: dict[str, Any] | None = None,
) -> Response:
    """The one path of sign, amend and addendum: the version the signer saw (``If-Match``), signed
    or not as the action needs (``on_signed``), the password again, then ``act``."""
    db = views.database_of(request)
    current, refusal = views.precondition(db, study_id, request.headers.get("if-match"), mine)
    if refusal is not None:
        return refusal
    views.must_be_signed(current, on_signed)
    signer = views.signer(request, who, password)
    done = act(db, signer, current.version)
    return JSONResponse(views.signed(db, done).model_dump(mode="json"))


@router.post(
    "/api/studies/{study_id}/sign",
    response_model=SignedAnswer,
    responses=REFUSED,
    summary="Sign the latest version (password again; If-Match)",
)
async def sign_study(study_id: SafeId, request: Request, who: CallerDep) -> Response:
    body = views.validated(SignRequest, parse_body(await request.body(), views.REQUEST))

    def act(db: Database, signer: Person, version: int) -> signing.Signed:
        return signing.sign(
            db,
            study_id,
            signer,
            meaning=body.meaning,
            origin=WEB,
            expect_version=version,
            settings=lab_of(request).settings,
        )

    return await run_in_threadpool(
        lambda: _signing(request, who, study_id, password=body.password, on_signed=False, act=act)
    )


@router.post(
    "/api/studies/{study_id}/amend",
    response_model=SignedAnswer,
    responses=REFUSED,
    summary="Amend the signed latest version: a new signed version with a reason (If-Match)",
)
async def amend_study(study_id: SafeId, request: Request, who: CallerDep) -> Response:
    body = views.validated(AmendRequest, parse_body(await request.body(), views.REQUEST))
    study = views.study_of(body.study)

    def act(db: Database, signer: Person, version: int) -> signing.Signed:
        return signing.amend(
            db,
            study_id,
            signer,
            edited=study,
            reason=body.reason,
            correction=body.correction,
            meaning=body.meaning,
            origin=WEB,
            expect_version=version,
            settings=lab_of(request).settings,
        )

    mine = saving.study_json(study)
    return await run_in_threadpool(
        lambda: _signing(
            request, who, study_id, password=body.password, on_signed=True, act=act, mine=mine
        )
    )


@router.post(
    "/api/studies/{study_id}/addendum",
    response_model=SignedAnswer,
    responses=REFUSED,
    summary="Add an addendum to the signed latest version: a new signed version (If-Match)",
)
async def add_addendum(study_id: SafeId, request: Request, who: CallerDep) -> Response:
    body = views.validated(AddendumRequest, parse_body(await request.body(), views.REQUEST))

    def act(db: Database, signer: Person, version: int) -> signing.Signed:
        return signing.amend(
            db,
            study_id,
            signer,
            addendum=body.text,
            reason=body.reason,
            origin=WEB,
            expect_version=version,
            settings=lab_of(request).settings,
        )

    return await run_in_threadpool(
        lambda: _signing(request, who, study_id, password=body.password, on_signed=True, act=act)
    )


@router.get(
    "/api/studies/{study_id}/pdf",
    responses={200: {"content": {"application/pdf": {}}}, **REFUSED},
    summary="The signed PDF of a version (latest when no version), byte for byte as stored",
)
def signed_pdf(study_id: SafeId, request: Request, version: int | None = None) -> Response:
    db = views.database_of(request)
    with views.found(), db.read() as session:
        _, row = versions.get_version(session, study_id, version)
        sig = versions.signature_of(session, row)
        if sig is None:
            raise NotFound(
                f"study {study_id}",
                f"version {row.version} is not signed; its PDF is made when it is signed",
            )
        data, number = bytes(sig.pdf), row.version
    return Response(
        data,
        media_type="application/pdf",
        headers={"content-disposition": f'inline; filename="{study_id}.v{number}.pdf"'},
    )


@router.get(
    "/api/studies/{study_id}/history",
    responses=REFUSED,
    summary="Versions, signatures and the audit events of a study (as `store history --json`)",
)
def study_history(study_id: SafeId, request: Request) -> dict[str, Any]:
    with views.found():
        return history.history(views.database_of(request), study_id)


@router.put(
    "/api/studies/{study_id}/assignment",
    response_model=AssignmentAnswer,
    responses=REFUSED,
    summary="Assign the study to a reader (or clear it with null)",
)
async def assign_study(study_id: SafeId, request: Request, who: CallerDep) -> AssignmentAnswer:
    body = views.validated(AssignmentRequest, parse_body(await request.body(), views.REQUEST))
    db = views.database_of(request)

    def work() -> AssignmentAnswer:
        with views.found():
            before = worklist.assign(db, study_id, body.reader, actor=who.person.name, origin=WEB)
        return AssignmentAnswer(study_id=study_id, reader=body.reader, before=before)

    return await run_in_threadpool(work)
