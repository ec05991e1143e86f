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
import json
import logging
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Annotated, Any, TypeVar

from fastapi import APIRouter, HTTPException, Query, Request
from fastapi.responses import JSONResponse, Response
from pydantic import BaseModel, ValidationError
from starlette.concurrency import run_in_threadpool

from reporting.errors import InputError, InputErrors
from reporting.load import study_from_data
from reporting.model import SafeId, Study
from reporting.phrases import built_in_library
from reporting.results import Analysis
from reporting.store import (
    conflicts,
    content,
    history,
    saving,
    signing,
    users,
    versions,
    worklist,
)
from reporting.store.canonical import Origin
from reporting.store.engine import Database
from reporting.store.errors import AuthError, NotFound
from reporting.store.worklist import WorklistStatus
from reporting.web.analysing import analysis_response, analysis_result
from reporting.web.api import REFUSED, AnalyzeResult, Problem, study_body
from reporting.web.bodies import parse_body
from reporting.web.lab.access import Caller, CallerDep
from reporting.web.lab.context import lab_of
from reporting.web.lab.study_shapes import (
    AddendumRequest,
    AmendRequest,
    AssignmentAnswer,
    AssignmentRequest,
    EarlierStudy,
    FieldChange,
    NewStudy,
    SignatureView,
    SignedAnswer,
    SignRequest,
    StudyConflict,
    StudyView,
    Worklist,
    WorklistRow,
)
from reporting.web.reader import (
    ConfirmedImpression,
    PhraseListing,
    confirmed_impression,
    phrase_listing,
)

log = logging.getLogger(__name__)

router = APIRouter()
WEB = Origin.WEB
REQUEST = "request"
STUDY = "study"
Model = TypeVar("Model", bound=BaseModel)
IF_MATCH_NEEDED = (
    "send If-Match with the ETag of the version your changes start from (428 Precondition Required)"
)


# --- helpers --------------------------------------------------------------------------------


def _db(request: Request) -> Database:
    return lab_of(request).db


@contextmanager
def _found() -> Iterator[None]:
    """A missing study or version as 404."""
    try:
        yield
    except NotFound as exc:
        raise HTTPException(404, str(exc)) from None


def _validated(model: type[Model], data: Any) -> Model:
    """``data`` as ``model``, or located problems (``request: field``) as the page shows them."""
    if not isinstance(data, dict):
        raise InputError(REQUEST, "send a JSON object")
    try:
        return model.model_validate(data)
    except ValidationError as exc:
        raise InputErrors(
            [
                InputError(
                    f"{REQUEST}: {'.'.join(str(p) for p in e['loc'])}" if e["loc"] else REQUEST,
                    e["msg"],
                )
                for e in exc.errors()
            ]
        ) from None


def _study(data: dict[str, Any]) -> Study:
    return study_from_data(data, source=STUDY)


def _pdf_url(study_id: str, version: int) -> str:
    return f"/api/studies/{study_id}/pdf?version={version}"


def _view(db: Database, opened: saving.Opened) -> StudyView:
    """The page's view of an opened version: with the patient's earlier studies and the
    comparison with the prior signed study (the signed record's own, for a signed version)."""
    with db.read() as session:
        earlier = worklist.earlier(
            session, opened.patient_id, opened.stored.study.study.date.isoformat()
        )
        prior, comparison = None, None
        if opened.signed:  # the comparison the signed record holds
            _, row = versions.get_version(session, opened.study_id, opened.version)
            sig = versions.signature_of(session, row)
            assert sig is not None
            comparison = json.loads(bytes(sig.record_json)).get("comparison")
        else:
            prior = history.prior_of(session, opened.stored)
    if not opened.signed:
        comparison = _comparison(opened.stored, prior)
    return StudyView(
        study_id=opened.study_id,
        study=opened.study,
        version=opened.version,
        latest_version=opened.latest,
        status=opened.status,
        read_only=opened.signed,
        signature=SignatureView(**opened.signature) if opened.signature else None,
        author=opened.author,
        created_at=opened.created_at,
        awaiting_reader=opened.awaiting_reader,
        assigned_reader=opened.assigned_reader,
        etag=opened.etag,
        pdf=_pdf_url(opened.study_id, opened.version) if opened.signed else None,
        earlier=[EarlierStudy(study_id=s, study_date=d, status=st) for s, d, st in earlier],
        comparison=comparison,
    )


def _comparison(stored: content.Content, prior: history.PriorStudy | None) -> dict[str, Any] | None:
    if prior is None:
        return None
    from reporting.export.record import record_dict

    analysis = history.compared(content.analyse(stored, final=False), prior)
    value = record_dict(analysis).get("comparison")
    return value if isinstance(value, dict) else None


def _answer(view: StudyView, status: int = 200) -> JSONResponse:
    return JSONResponse(
        view.model_dump(mode="json"), status_code=status, headers={"etag": view.etag}
    )


def _conflict(
    status: int,
    detail: str,
    study_id: str,
    *,
    base: saving.Opened | None = None,
    current: saving.Opened | None = None,
    mine: dict[str, Any] | None = None,
) -> JSONResponse:
    """412/428 with the study as stored now and, for 412, the changes field by field."""
    changes: list[FieldChange] = []
    if current is not None:
        theirs = current.study
        before = base.study if base is not None else theirs
        changes = [
            FieldChange(**c.as_json())
            for c in conflicts.changes(before, theirs, before if mine is None else mine)
        ]
    body = StudyConflict(
        detail=detail,
        problems=[Problem(location=f"study {study_id}", path="", problem=detail)],
        etag=current.etag if current else None,
        current=current.study if current else None,
        base_version=base.version if base else None,
        current_version=current.version if current else None,
        changed_by=current.author if current else None,
        changed_at=current.created_at if current else None,
        changes=changes,
    )
    headers = {"etag": current.etag} if current else {}
    return JSONResponse(body.model_dump(mode="json"), status_code=status, headers=headers)


def _precondition(
    db: Database, study_id: str, if_match: str | None, mine: dict[str, Any] | None = None
) -> tuple[saving.Opened, JSONResponse | None]:
    """The latest version, and the refusal when ``If-Match`` is missing (428) or stale (412)."""
    with _found():
        current = saving.read(db, study_id)
    if if_match is None:
        return current, _conflict(
            428, f"study {study_id}: {IF_MATCH_NEEDED}", study_id, current=current
        )
    if saving.matches(current.etag, if_match):
        return current, None
    number = saving.tagged_version(if_match)
    base = None
    if number is not None and number < current.version:
        base = saving.read(db, study_id, number)
    detail = (
        f"study {study_id}: changed since you opened it (version {current.version} by "
        f"{current.author} at {current.created_at}); nothing was written (412 Precondition Failed)"
    )
    return current, _conflict(412, detail, study_id, base=base, current=current, mine=mine)


def _signer(db: Database, who: Caller, password: str) -> users.Person:
    """The caller, authenticated again by password; a wrong one counts towards the lockout."""
    try:
        return users.authenticate(db, who.person.name, password, role=users.Role.READER, origin=WEB)
    except AuthError as exc:
        raise AuthError("password", exc.problem) from None


def _signed(db: Database, done: signing.Signed) -> SignedAnswer:
    current = saving.read(db, done.study_id, done.version)
    return SignedAnswer(
        study_id=done.study_id,
        version=done.version,
        status=done.status,
        etag=current.etag,
        pdf=_pdf_url(done.study_id, done.version),
        record_sha256=done.record_sha256,
        pdf_sha256=done.pdf_sha256,
    )


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
        _db(request),
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
    body = _validated(NewStudy, parse_body(await request.body(), REQUEST))
    study = _study(body.study)
    db = _db(request)

    def work() -> StudyView:
        return _view(db, saving.create(db, study, who.person, origin=WEB))

    return _answer(await run_in_threadpool(work), 201)


@router.get(
    "/api/studies/{study_id}",
    response_model=StudyView,
    responses=REFUSED,
    summary="Open a study's latest version (its ETag for If-Match)",
)
def open_study(study_id: SafeId, request: Request) -> JSONResponse:
    db = _db(request)
    with _found():
        return _answer(_view(db, saving.read(db, study_id)))


@router.get(
    "/api/studies/{study_id}/versions/{number}",
    response_model=StudyView,
    responses=REFUSED,
    summary="Open one version of a study",
)
def open_version(study_id: SafeId, number: int, request: Request) -> JSONResponse:
    db = _db(request)
    with _found():
        return _answer(_view(db, saving.read(db, study_id, number)))


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
    body = _validated(NewStudy, parse_body(await request.body(), REQUEST))
    study = _study(body.study)
    mine = saving.study_json(study)
    if_match = request.headers.get("if-match")
    db = _db(request)

    def work() -> Response:
        if if_match is None:
            with _found():
                current = saving.read(db, study_id)
            return _conflict(428, f"study {study_id}: {IF_MATCH_NEEDED}", study_id, current=current)
        try:
            with _found():
                opened, _ = saving.save(
                    db, study_id, study, who.person, if_match=if_match, origin=WEB
                )
        except saving.Stale as exc:
            detail = f"{exc.location}: {exc.problem} (412 Precondition Failed)"
            return _conflict(412, detail, study_id, base=exc.base, current=exc.current, mine=mine)
        return _answer(_view(db, opened))

    return await run_in_threadpool(work)


@router.post(
    "/api/studies/{study_id}/sign",
    response_model=SignedAnswer,
    responses=REFUSED,
    summary="Sign the latest version (password again; If-Match)",
)
async def sign_study(study_id: SafeId, request: Request, who: CallerDep) -> Response:
    body = _validated(SignRequest, parse_body(await request.body(), REQUEST))
    if_match = request.headers.get("if-match")
    db = _db(request)

    def work() -> Response:
        current, refusal = _precondition(db, study_id, if_match)
        if refusal is not None:
            return refusal
        signer = _signer(db, who, body.password)
        done = signing.sign(
            db, study_id, signer, meaning=body.meaning, origin=WEB, expect_version=current.version
        )
        return JSONResponse(_signed(db, done).model_dump(mode="json"))

    return await run_in_threadpool(work)


@router.post(
    "/api/studies/{study_id}/amend",
    response_model=SignedAnswer,
    responses=REFUSED,
    summary="Amend the signed latest version: a new signed version with a reason (If-Match)",
)
async def amend_study(study_id: SafeId, request: Request, who: CallerDep) -> Response:
    body = _validated(AmendRequest, parse_body(await request.body(), REQUEST))
    study = _study(body.study)
    if_match = request.headers.get("if-match")
    db = _db(request)

    def work() -> Response:
        current, refusal = _precondition(db, study_id, if_match, saving.study_json(study))
        if refusal is not None:
            return refusal
        signer = _signer(db, who, body.password)
        done = signing.amend(
            db,
            study_id,
            signer,
            edited=study,
            reason=body.reason,
            correction=body.correction,
            meaning=body.meaning,
            origin=WEB,
            expect_version=current.version,
        )
        return JSONResponse(_signed(db, done).model_dump(mode="json"))

    return await run_in_threadpool(work)


@router.post(
    "/api/studies/{study_id}/addendum",
    response_model=SignedAnswer,
    responses=REFUSED,
    summary="Add an addendum to the signed latest version: a new signed version (If-Match)",
)
async def add_addendum(study_id: SafeId, request: Request, who: CallerDep) -> Response:
    body = _validated(AddendumRequest, parse_body(await request.body(), REQUEST))
    if_match = request.headers.get("if-match")
    db = _db(request)

    def work() -> Response:
        current, refusal = _precondition(db, study_id, if_match)
        if refusal is not None:
            return refusal
        signer = _signer(db, who, body.password)
        done = signing.amend(
            db,
            study_id,
            signer,
            addendum=body.text,
            reason=body.reason,
            origin=WEB,
            expect_version=current.version,
        )
        return JSONResponse(_signed(db, done).model_dump(mode="json"))

    return await run_in_threadpool(work)


@router.get(
    "/api/studies/{study_id}/pdf",
    responses={200: {"content": {"application/pdf": {}}}, **REFUSED},
    summary="The signed PDF of a version (latest when no version), byte for byte as stored",
)
def signed_pdf(study_id: SafeId, request: Request, version: int | None = None) -> Response:
    db = _db(request)
    with _found(), db.read() as session:
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
    with _found():
        return history.history(_db(request), study_id)


@router.put(
    "/api/studies/{study_id}/assignment",
    response_model=AssignmentAnswer,
    responses=REFUSED,
    summary="Assign the study to a reader (or clear it with null)",
)
async def assign_study(study_id: SafeId, request: Request, who: CallerDep) -> AssignmentAnswer:
    body = _validated(AssignmentRequest, parse_body(await request.body(), REQUEST))
    db = _db(request)

    def work() -> AssignmentAnswer:
        with _found():
            before = worklist.assign(db, study_id, body.reader, actor=who.person.name, origin=WEB)
        return AssignmentAnswer(study_id=study_id, reader=body.reader, before=before)

    return await run_in_threadpool(work)


# --- live analysis and the reader's phrases -------------------------------------------------


def analysed(db: Database, study: Study) -> Analysis:
    """The study's analysis as the store will sign it: the curve and map files of its stored
    latest version (if the study is stored and still names them), compared with the patient's
    prior signed study when the store has one."""
    files: dict[str, str] = {}
    with db.read() as session:
        known = versions.study_row(session, study.study.id)
        if known is not None:
            latest = versions.latest(session, known)
            named = {study.perfusion_curves, study.territory_map}
            stored_files = content.parse(bytes(latest.content)).files
            files = {k: v for k, v in stored_files.items() if k in named}
        stored = content.build(study, files)
        prior = history.prior_of(session, stored)
    return history.compared(content.analyse(stored, final=False), prior)


@router.post(
    "/api/analyze",
    response_model=AnalyzeResult,
    responses=REFUSED,
    openapi_extra=study_body(),
    summary="Validate and analyse a study (as folder mode), compared with the prior signed study",
)
async def analyze_study(request: Request) -> JSONResponse:
    study = _study(parse_body(await request.body(), STUDY))
    lab = lab_of(request)
    library = lab.phrases if lab.phrases is not None else built_in_library()
    result = await run_in_threadpool(lambda: analysis_result(analysed(lab.db, study), library))
    return analysis_response(result)


@router.get("/api/phrases", response_model=PhraseListing, summary="The lab's phrase library")
def phrases(request: Request) -> PhraseListing:
    lab = lab_of(request)
    if lab.phrases is None:
        return phrase_listing(built_in_library(), "built-in")
    return phrase_listing(lab.phrases, "lab")


@router.post(
    "/api/impression/confirm",
    response_model=ConfirmedImpression,
    responses=REFUSED,
    openapi_extra=study_body(),
    summary="Confirm the reader's impression against the findings computed now",
)
async def confirm(request: Request) -> ConfirmedImpression:
    data = parse_body(await request.body(), STUDY)
    db = _db(request)
    return await run_in_threadpool(lambda: confirmed_impression(data, lambda s: analysed(db, s)))
