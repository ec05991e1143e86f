"""What the lab's study routes share: reading the request, the page's view of a version (with the
patient's earlier studies and the comparison with the prior signed study), the 412/428 answers
with the changes field by field, and the signer's password check (see
:mod:`reporting.web.lab.studies`).
"""

from __future__ import annotations

import json
import logging
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any, TypeVar

from fastapi import HTTPException, Request
from fastapi.responses import JSONResponse
from pydantic import BaseModel, ValidationError

from reporting.errors import InputError, InputErrors
from reporting.load import study_from_data
from reporting.model import Study
from reporting.settings import Settings
from reporting.store import conflicts, content, history, saving, signing, users, worklist
from reporting.store.canonical import Origin
from reporting.store.engine import Database
from reporting.store.errors import AuthError, ConflictError, NotFound
from reporting.web.api import Problem
from reporting.web.lab.access import Caller
from reporting.web.lab.context import lab_of
from reporting.web.lab.study_shapes import (
    EarlierStudy,
    FieldChange,
    SignatureView,
    SignedAnswer,
    StudyConflict,
    StudyView,
)

log = logging.getLogger(__name__)

WEB = Origin.WEB
REQUEST = "request"
STUDY = "study"
Model = TypeVar("Model", bound=BaseModel)
IF_MATCH_NEEDED = (
    "send If-Match with the ETag of the version your changes start from (428 Precondition Required)"
)


def database_of(request: Request) -> Database:
    return lab_of(request).db


@contextmanager
def found() -> Iterator[None]:
    """A missing study or version as 404."""
    try:
        yield
    except NotFound as exc:
        raise HTTPException(404, str(exc)) from None


def validated(model: type[Model], data: Any) -> Model:
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


def study_of(data: dict[str, Any]) -> Study:
    return study_from_data(data, source=STUDY)


def pdf_url(study_id: str, version: int) -> str:
    return f"/api/studies/{study_id}/pdf?version={version}"


def view(db: Database, opened: saving.Opened, settings: Settings) -> StudyView:
    """The page's view of an opened version: with the patient's earlier studies and the
    comparison with the prior signed study (the signed record's own, for a signed version; else
    made with the lab's ``settings``)."""
    with db.read() as session:
        earlier = worklist.earlier(
            session, opened.patient_id, opened.stored.study.study.date.isoformat()
        )
        prior, comparison = None, None
        if opened.signed_record is not None:  # the comparison the signed record holds
            comparison = json.loads(opened.signed_record).get("comparison")
        else:
            prior = history.prior_of(session, opened.stored)
    if not opened.signed:
        comparison = comparison_of(opened.stored, prior, settings)
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
        default_meaning=signing.DEFAULT_MEANING,
        pdf=pdf_url(opened.study_id, opened.version) if opened.signed else None,
        earlier=[EarlierStudy(study_id=s, study_date=d, status=st) for s, d, st in earlier],
        comparison=comparison,
    )


def comparison_of(
    stored: content.Content, prior: history.PriorStudy | None, settings: Settings
) -> dict[str, Any] | None:
    if prior is None:
        return None
    from reporting.export.record import record_dict

    analysis = history.compared(content.analyse(stored, final=False, settings=settings), prior)
    value = record_dict(analysis).get("comparison")
    return value if isinstance(value, dict) else None


def answer(view: StudyView, status: int = 200) -> JSONResponse:
    return JSONResponse(
        view.model_dump(mode="json"), status_code=status, headers={"etag": view.etag}
    )


def conflict(
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
    merged: dict[str, Any] | None = None
    if current is not None:
        theirs = current.study
        before = base.study if base is not None else theirs
        changes = [
            FieldChange(**c.as_json())
            for c in conflicts.changes(before, theirs, before if mine is None else mine)
        ]
        if mine is not None and base is not None:
            merged = conflicts.mine_on_top(base.study, theirs, mine)
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
        merged=merged,
    )
    headers = {"etag": current.etag} if current else {}
    return JSONResponse(body.model_dump(mode="json"), status_code=status, headers=headers)


def precondition(
    db: Database, study_id: str, if_match: str | None, mine: dict[str, Any] | None = None
) -> tuple[saving.Opened, JSONResponse | None]:
    """The latest version, and the refusal when ``If-Match`` is missing (428) or stale (412)."""
    with found():
        current = saving.read(db, study_id)
    if if_match is None:
        return current, conflict(
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
    return current, conflict(412, detail, study_id, base=base, current=current, mine=mine)


def must_be_signed(current: saving.Opened, signed: bool) -> None:
    """409 before the password is asked: signing needs an unsigned latest version, amending and
    adding an addendum a signed one."""
    if current.signed and not signed:
        raise saving.SignedStudy(
            f"study {current.study_id}",
            f"version {current.version} is already signed; a signed version is never signed "
            "again (use Amend or Addendum)",
        )
    if signed and not current.signed:
        raise ConflictError(
            f"study {current.study_id}",
            f"version {current.version} is not signed yet: save your changes and sign it instead",
        )


SIGN_FAILED = "sign_failed"
"""Audit action of a wrong password given when signing (it counts towards the lockout)."""


def signer(request: Request, who: Caller, password: str) -> users.Person:
    """The caller, authenticated again by password (21 CFR 11.200); a wrong one counts towards
    the lockout like a failed sign-in, and locking ends the user's sessions."""
    lab = lab_of(request)
    try:
        return users.authenticate(
            lab.db,
            who.person.name,
            password,
            role=users.Role.READER,
            origin=WEB,
            settings=lab.settings,
            failed_action=SIGN_FAILED,
            address=who.address,
        )
    except AuthError as exc:
        raise AuthError("password", exc.problem) from None


def signed(db: Database, done: signing.Signed) -> SignedAnswer:
    current = saving.read(db, done.study_id, done.version)
    return SignedAnswer(
        study_id=done.study_id,
        version=done.version,
        status=done.status,
        etag=current.etag,
        pdf=pdf_url(done.study_id, done.version),
        record_sha256=done.record_sha256,
        pdf_sha256=done.pdf_sha256,
    )
