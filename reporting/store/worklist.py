"""The lab's worklist: every study by status, date, assigned reader and patient, and assignments.

A study's worklist status comes from its latest version (FACTS §9 statuses underneath):

- ``unread``: the latest version is preliminary and awaits a reader (a sonographer's hand-off, or
  an import by a user without the reader role);
- ``preliminary``: the latest version is preliminary, saved by a reader;
- ``signed``: the latest version is a signed final report;
- ``amended``: the latest version is a signed amendment, correction or addendum.

The ``worklist`` table keeps that status per study and is rewritten in the same writing
transaction as every version and signature (:func:`record`), so listing 100,000 studies reads
indexes (status and date) instead of finding each study's latest version. It holds nothing the
versions and signatures do not; :func:`rebuilt` recomputes it from them (a test compares the two).
"""

from __future__ import annotations

import datetime as dt
import logging
from dataclasses import dataclass
from functools import cache
from typing import Any

from sqlalchemy import Select, bindparam, func, select
from sqlalchemy.orm import Session

from reporting.store import audit
from reporting.store.canonical import Origin, now
from reporting.store.engine import Database
from reporting.store.errors import StoreError
from reporting.store.schema import (
    AssignmentRow,
    SignatureRow,
    StudyRow,
    User,
    VersionRow,
    WorklistRow,
)
from reporting.store.status import VersionStatus
from reporting.vocabulary import Vocabulary

log = logging.getLogger(__name__)

DEFAULT_LIMIT = 50
MAX_LIMIT = 500
"""Most rows one worklist page holds."""


class WorklistStatus(Vocabulary):
    """Where a study stands in the lab's work (see the module docstring)."""

    UNREAD = "unread"
    """Preliminary and awaiting a reader (a hand-off)."""
    PRELIMINARY = "preliminary"
    """Preliminary, saved by a reader, not signed yet."""
    SIGNED = "signed"
    """Signed final report."""
    AMENDED = "amended"
    """Signed amendment, correction or addendum."""


def status_of(version_status: str, *, signed: bool, awaiting_reader: bool) -> WorklistStatus:
    """The worklist status of a study whose latest version is as given."""
    if not signed:
        return WorklistStatus.UNREAD if awaiting_reader else WorklistStatus.PRELIMINARY
    if VersionStatus(version_status) is VersionStatus.PRELIMINARY:
        return WorklistStatus.SIGNED
    return WorklistStatus.AMENDED


def record(
    session: Session, study: StudyRow, row: VersionRow, signature: SignatureRow | None
) -> None:
    """Rewrite ``study``'s worklist row for its new latest version ``row`` (inside the append)."""
    entry = session.get(WorklistRow, study.id)
    if entry is None:
        entry = WorklistRow(study_pk=study.id)
        session.add(entry)
    entry.status = status_of(
        row.status, signed=signature is not None, awaiting_reader=bool(row.awaiting_reader)
    ).value
    entry.version = row.version
    entry.author = row.author
    entry.updated_at = signature.signed_at if signature is not None else row.created_at
    entry.study_date = row.study_date
    entry.awaiting_reader = bool(row.awaiting_reader) and signature is None
    session.flush()


@dataclass(frozen=True)
class Entry:
    """One study on the worklist."""

    study_id: str
    patient_id: str | None
    study_date: str | None
    status: WorklistStatus
    version: int
    author: str
    updated_at: str
    assigned_reader: str | None
    awaiting_reader: bool


@dataclass(frozen=True)
class Query:
    """What to list (every field optional); dates are inclusive."""

    status: WorklistStatus | None = None
    reader: str | None = None
    patient: str | None = None
    date_from: dt.date | None = None
    date_to: dt.date | None = None
    limit: int = DEFAULT_LIMIT
    offset: int = 0


_COLUMNS = (
    StudyRow.study_id,
    StudyRow.patient_id,
    WorklistRow.study_date,
    WorklistRow.status,
    WorklistRow.version,
    WorklistRow.author,
    WorklistRow.updated_at,
    WorklistRow.assigned_reader,
    WorklistRow.awaiting_reader,
)
_NEWEST_FIRST = (WorklistRow.study_date.desc(), WorklistRow.study_pk.desc())


def _filtered(statement: Select[Any], used: frozenset[str]) -> Select[Any]:
    """``statement`` over the worklist with the filters in ``used`` as bound parameters; studies
    are joined only for the patient filter, so each filter reads its own index."""
    if "patient" in used:
        statement = statement.join(StudyRow, StudyRow.id == WorklistRow.study_pk).where(
            StudyRow.patient_id == bindparam("patient")
        )
    if "reader" in used:
        statement = statement.where(WorklistRow.assigned_reader == bindparam("reader"))
    if "status" in used:
        statement = statement.where(WorklistRow.status == bindparam("status"))
    if "date_from" in used:
        statement = statement.where(WorklistRow.study_date >= bindparam("date_from"))
    if "date_to" in used:
        statement = statement.where(WorklistRow.study_date <= bindparam("date_to"))
    return statement


@cache
def _statements(used: frozenset[str]) -> tuple[Select[Any], Select[Any]]:
    """The count and page statements for a set of filters, built once (building a statement
    costs more than running it on the indexes)."""
    keys = (
        _filtered(select(WorklistRow.study_pk), used)
        .order_by(*_NEWEST_FIRST)
        .limit(bindparam("limit"))
        .offset(bindparam("offset"))
        .subquery()
    )
    page = (
        select(*_COLUMNS)
        .select_from(keys)
        .join(WorklistRow, WorklistRow.study_pk == keys.c.study_pk)
        .join(StudyRow, StudyRow.id == keys.c.study_pk)
        .order_by(*_NEWEST_FIRST)
    )
    count = _filtered(select(func.count()).select_from(WorklistRow), used)
    return count, page


def listing(db: Database, query: Query) -> tuple[int, list[Entry]]:
    """The number of studies matching ``query`` and one page of them, newest study date first.

    The page's study keys come from the worklist's indexes alone (filters, order, limit); only
    those rows are then joined with their study.
    """
    if not 1 <= query.limit <= MAX_LIMIT:
        raise StoreError("limit", f"must be between 1 and {MAX_LIMIT}")
    if query.offset < 0:
        raise StoreError("offset", "must not be negative")
    values: dict[str, Any] = {
        "status": query.status.value if query.status is not None else None,
        "reader": query.reader,
        "patient": query.patient,
        "date_from": query.date_from.isoformat() if query.date_from else None,
        "date_to": query.date_to.isoformat() if query.date_to else None,
    }
    params = {k: v for k, v in values.items() if v is not None}
    count, page = _statements(frozenset(params))
    with db.connect() as conn:
        total = conn.execute(count, params).scalar_one()
        rows = conn.execute(page, params | {"limit": query.limit, "offset": query.offset}).all()
    return total, [
        Entry(
            study_id=r[0],
            patient_id=r[1],
            study_date=r[2],
            status=WorklistStatus(r[3]),
            version=r[4],
            author=r[5],
            updated_at=r[6],
            assigned_reader=r[7],
            awaiting_reader=bool(r[8]),
        )
        for r in rows
    ]


EARLIER_LIMIT = 20
"""Most earlier studies listed beside a study."""


_EARLIER = (
    select(StudyRow.study_id, WorklistRow.study_date, WorklistRow.status)
    .join(WorklistRow, WorklistRow.study_pk == StudyRow.id)
    .where(
        StudyRow.patient_id == bindparam("patient"), WorklistRow.study_date < bindparam("before")
    )
    .order_by(WorklistRow.study_date.desc(), StudyRow.id.desc())
    .limit(bindparam("limit"))
)
"""Built once (building a statement costs more than running it)."""


def earlier(
    session: Session, patient_id: str | None, before: str | None, *, limit: int = EARLIER_LIMIT
) -> list[tuple[str, str | None, WorklistStatus]]:
    """The patient's studies dated before ``before`` (ISO date): (study id, date, status), newest
    first; one query on indexed columns (``studies.patient_id``, the worklist's primary key)."""
    if patient_id is None or before is None:
        return []
    rows = session.execute(
        _EARLIER, {"patient": patient_id, "before": before, "limit": limit}
    ).all()
    return [(r[0], r[1], WorklistStatus(r[2])) for r in rows]


def assigned_reader(session: Session, study: StudyRow) -> str | None:
    row = session.get(AssignmentRow, study.id)
    return row.reader if row is not None else None


def assign(
    db: Database, study_id: str, reader: str | None, *, actor: str, origin: Origin
) -> str | None:
    """Assign ``study_id`` to the user ``reader`` (who must hold the reader role), or clear it
    (``None``); an audit event ``assign`` records it. Returns the reader assigned before."""
    from reporting.store.users import Role, find, person
    from reporting.store.versions import study_row

    with db.write() as session:
        study = study_row(session, study_id)
        if study is None:
            raise StoreError(f"study {study_id}", "not in the store")
        if reader is not None:
            user: User | None = find(session, reader)
            if user is None:
                raise StoreError("reader", f"no user {reader!r}")
            if Role.READER not in person(user).roles:
                raise StoreError("reader", f"{reader} does not have the reader role")
        current = session.get(AssignmentRow, study.id)
        before = current.reader if current is not None else None
        if before == reader:
            return before
        if reader is None:
            assert current is not None
            session.delete(current)
        elif current is None:
            session.add(
                AssignmentRow(
                    study_pk=study.id, reader=reader, assigned_by=actor, assigned_at=now()
                )
            )
        else:
            current.reader, current.assigned_by, current.assigned_at = reader, actor, now()
        entry = session.get(WorklistRow, study.id)
        if entry is not None:
            entry.assigned_reader = reader
        session.flush()
        audit.append(
            session,
            action="assign",
            actor=actor,
            origin=origin,
            study_id=study_id,
            detail={"reader": reader, "before": before},
        )
    log.info("study %s assigned to %s by %s", study_id, reader, actor)
    return before


def rebuilt(session: Session) -> dict[int, tuple[Any, ...]]:
    """The worklist recomputed from versions and signatures (study pk → row), for checking."""
    newest = (
        select(VersionRow.study_pk, func.max(VersionRow.version).label("top"))
        .group_by(VersionRow.study_pk)
        .subquery()
    )
    rows = session.execute(
        select(VersionRow, SignatureRow)
        .join(
            newest,
            (newest.c.study_pk == VersionRow.study_pk) & (newest.c.top == VersionRow.version),
        )
        .outerjoin(SignatureRow, SignatureRow.version_pk == VersionRow.id)
    ).all()
    out: dict[int, tuple[Any, ...]] = {}
    assigned = {a.study_pk: a.reader for a in session.scalars(select(AssignmentRow))}
    for row, sig in rows:
        awaiting = bool(row.awaiting_reader) and sig is None
        out[row.study_pk] = (
            status_of(row.status, signed=sig is not None, awaiting_reader=awaiting).value,
            row.version,
            row.author,
            sig.signed_at if sig is not None else row.created_at,
            row.study_date,
            awaiting,
            assigned.get(row.study_pk),
        )
    return out


def stored(session: Session) -> dict[int, tuple[Any, ...]]:
    """The worklist table as it is (study pk → row), for comparing with :func:`rebuilt`."""
    return {
        w.study_pk: (
            w.status,
            w.version,
            w.author,
            w.updated_at,
            w.study_date,
            bool(w.awaiting_reader),
            w.assigned_reader,
        )
        for w in session.scalars(select(WorklistRow))
    }
