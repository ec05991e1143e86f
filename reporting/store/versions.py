"""Study versions: importing study files, and reading versions back.

Importing checks every file first (nothing is written if any file has a problem), then appends in
one writing transaction: a new study gets version 1; a changed file of a known, unsigned study a
new version whose parent is the latest; an unchanged file nothing. A changed file of a signed
study is refused (amend it), as is a known study id with another patient. Nothing is updated in
place: each version row is inserted once, with the SHA-256 of its stored content bytes, and named
by an audit event that carries the same facts.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from sqlalchemy import bindparam, func, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from reporting.errors import InputError, InputErrors, ReportingError, problems_of
from reporting.store import audit, content, worklist
from reporting.store.canonical import Origin, now
from reporting.store.engine import Database
from reporting.store.errors import ConflictError, NotFound, StoreError
from reporting.store.schema import SignatureRow, StudyRow, VersionRow
from reporting.store.status import VersionStatus
from reporting.store.users import Person, Role

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Imported:
    """What importing one file did."""

    path: Path
    study_id: str
    version: int
    new: bool


def version_facts(row: VersionRow, study_id: str) -> dict[str, object]:
    """The facts of a version its audit event carries (and ``store verify`` compares).

    ``awaiting_reader`` is named only when true, so events written before it existed still match.
    """
    facts: dict[str, object] = {
        "study_id": study_id,
        "version": row.version,
        "parent_version": row.parent_version,
        "status": row.status,
        "author": row.author,
        "created_at": row.created_at,
        "reason": row.reason,
        "content_sha256": row.content_sha256,
        "study_date": row.study_date,
    }
    if row.awaiting_reader:
        facts["awaiting_reader"] = True
    return facts


def signature_facts(sig: SignatureRow, row: VersionRow) -> dict[str, object]:
    """What a sign event carries (and ``store verify`` compares with the signature row)."""
    return {
        "content_sha256": row.content_sha256,
        "signer": sig.signer,
        "signer_name": sig.signer_name,
        "signed_at": sig.signed_at,
        "meaning": sig.meaning,
        "record_sha256": sig.record_sha256,
        "pdf_sha256": sig.pdf_sha256,
        "chain_head": sig.chain_head,
    }


# Statements built once with bound parameters: building a statement costs more than running it
# (about 1.5 ms of CPU against 0.5 ms; benchmarks/bench_lab_page.py opens and analyses studies
# many times a second).
_STUDY_ROW = select(StudyRow).where(StudyRow.study_id == bindparam("sid"))
_LATEST = (
    select(VersionRow)
    .where(VersionRow.study_pk == bindparam("pk"))
    .order_by(VersionRow.version.desc())
    .limit(1)
)
_VERSION = select(VersionRow).where(
    VersionRow.study_pk == bindparam("pk"), VersionRow.version == bindparam("number")
)
_SIGNATURE = select(SignatureRow).where(SignatureRow.version_pk == bindparam("pk"))


def study_row(session: Session, study_id: str) -> StudyRow | None:
    return session.scalars(_STUDY_ROW, {"sid": study_id}).first()


def latest(session: Session, study: StudyRow) -> VersionRow:
    row = session.scalars(_LATEST, {"pk": study.id}).first()
    assert row is not None, "a study row always has a version"
    return row


def get_version(session: Session, study_id: str, number: int | None) -> tuple[StudyRow, VersionRow]:
    """The study and its version ``number`` (latest when ``None``); StoreError when missing."""
    study = study_row(session, study_id)
    if study is None:
        raise NotFound(f"study {study_id}", "not in the store")
    if number is None:
        return study, latest(session, study)
    row = session.scalars(_VERSION, {"pk": study.id, "number": number}).first()
    if row is None:
        count = session.scalar(
            select(func.max(VersionRow.version)).where(VersionRow.study_pk == study.id)
        )
        raise NotFound(f"study {study_id}", f"has no version {number} (versions 1–{count})")
    return study, row


def signature_of(session: Session, version: VersionRow) -> SignatureRow | None:
    return session.scalars(_SIGNATURE, {"pk": version.id}).first()


def add_version(
    session: Session,
    study: StudyRow,
    stored: content.Content,
    *,
    number: int,
    parent: int | None,
    status: VersionStatus,
    author: str,
    reason: str | None,
    origin: Origin,
    action: str,
    awaiting_reader: bool = False,
) -> VersionRow:
    """Insert one version and its audit event (inside a writing transaction), and rewrite the
    study's worklist row (:func:`reporting.store.worklist.record`)."""
    row = VersionRow(
        study_pk=study.id,
        version=number,
        parent_version=parent,
        status=status.value,
        author=author,
        created_at=now(),
        reason=reason,
        content=stored.data,
        content_sha256=stored.sha256,
        study_date=stored.study.study.date.isoformat(),
        awaiting_reader=awaiting_reader,
    )
    session.add(row)
    session.flush()
    worklist.record(session, study, row, None)
    audit.append(
        session,
        action=action,
        actor=author,
        origin=origin,
        study_id=study.study_id,
        version=number,
        detail=version_facts(row, study.study_id),
        at=row.created_at,
    )
    return row


def import_files(
    db: Database, paths: Sequence[Path], who: Person, *, origin: Origin
) -> list[Imported]:
    """Import study files (see the module docstring); all or nothing."""
    if not ({Role.READER, Role.SONOGRAPHER} & who.roles):
        raise StoreError(f"--as {who.name}", "needs the reader or sonographer role to import")
    prepared: list[tuple[Path, content.Content]] = []
    problems: list[InputError] = []
    seen: dict[str, Path] = {}
    for path in paths:
        try:
            stored = content.from_file(Path(path))
        except ReportingError as exc:
            problems += [
                p if isinstance(p, InputError) else InputError(str(path), str(p))
                for p in problems_of(exc)
            ]
            continue
        if stored.study_id in seen:
            problems.append(
                InputError(str(path), f"study {stored.study_id} is also in {seen[stored.study_id]}")
            )
            continue
        seen[stored.study_id] = Path(path)
        prepared.append((Path(path), stored))
    if problems:
        raise InputErrors(problems)
    try:
        with db.write() as session:
            return [_import_one(session, path, stored, who, origin) for path, stored in prepared]
    except IntegrityError:
        raise ConflictError(
            db.shown, "another process imported the same study at the same time; import again"
        ) from None


def _import_one(
    session: Session, path: Path, stored: content.Content, who: Person, origin: Origin
) -> Imported:
    study = study_row(session, stored.study_id)
    if study is None:
        study = StudyRow(study_id=stored.study_id, patient_id=stored.patient_id, created_at=now())
        session.add(study)
        session.flush()
        add_version(
            session,
            study,
            stored,
            number=1,
            parent=None,
            status=VersionStatus.PRELIMINARY,
            author=who.name,
            reason="imported",
            origin=origin,
            action="import",
            awaiting_reader=Role.READER not in who.roles,
        )
        return Imported(path, stored.study_id, 1, True)
    if study.patient_id != stored.patient_id:
        raise StoreError(
            f"{path}: patient.id",
            f"study {stored.study_id} belongs to patient {study.patient_id or '(none)'} in the store, "
            f"not {stored.patient_id or '(none)'}; check the study id",
        )
    last = latest(session, study)
    if last.content_sha256 == stored.sha256:
        return Imported(path, stored.study_id, last.version, False)
    if signature_of(session, last) is not None:
        raise StoreError(
            str(path),
            f"study {stored.study_id} version {last.version} is signed: change it with "
            "`segreport store amend` (with a reason), not by importing",
        )
    add_version(
        session,
        study,
        stored,
        number=last.version + 1,
        parent=last.version,
        status=VersionStatus.PRELIMINARY,
        author=who.name,
        reason="changed file imported",
        origin=origin,
        action="import",
        awaiting_reader=Role.READER not in who.roles,
    )
    return Imported(path, stored.study_id, last.version + 1, True)
