"""Saving a study from the lab page: a new preliminary version, never a silent overwrite.

Each version has an entity tag ``"v<version>-<first 16 hex of its content SHA-256>"``
(:func:`etag`). A save names the version it started from (``If-Match``); inside the writing
transaction (which holds the store's append lock) the study's latest version is compared with it:

- the latest version is signed → :class:`SignedStudy` (amend it or add an addendum instead);
- the save is the latest content already → nothing written, the latest version is answered;
- the latest version is not the one named → :class:`Stale`, carrying the base version the edit
  started from and the version stored now, so the page can show what the other person changed,
  field by field (:mod:`reporting.store.conflicts`);
- otherwise a new preliminary version is appended. It awaits a reader when its author does not
  hold the reader role (a sonographer's hand-off, shown as ``unread`` on the worklist).

Nothing is written on any refusal. The study must analyse (the same check as importing a file);
its id must be the one saved and its patient the one the store holds for the study.
"""

from __future__ import annotations

import logging
import re
from dataclasses import dataclass
from typing import Any

from sqlalchemy import bindparam, select
from sqlalchemy.orm import Session

from reporting.errors import InputError
from reporting.model import Study
from reporting.store import content, versions, worklist
from reporting.store.canonical import Origin, now
from reporting.store.engine import Database
from reporting.store.errors import ConflictError, StoreError
from reporting.store.schema import SignatureRow, StudyRow, VersionRow
from reporting.store.status import VersionStatus, effective_status
from reporting.store.users import Person, Role

log = logging.getLogger(__name__)

_ETAG = re.compile(r'^(?:W/)?"v(\d{1,9})-([0-9a-f]{16})"$')
SAVED_REASON = "saved in the lab page"
CREATED_REASON = "entered in the lab page"


def etag(row: VersionRow) -> str:
    """The entity tag of a version (RFC 9110 section 8.8.3 quoting)."""
    return f'"v{row.version}-{row.content_sha256[:16]}"'


def tagged_version(header: str | None) -> int | None:
    """The version number an ``If-Match`` header names (``None`` when it names none of ours)."""
    if header is None:
        return None
    for part in header.split(","):
        found = _ETAG.match(part.strip())
        if found:
            return int(found.group(1))
    return None


def matches(tag: str, header: str) -> bool:
    """Whether ``If-Match: header`` names the entity tag ``tag`` (strong comparison; ``*``
    matches any)."""
    tags = [part.strip() for part in header.split(",")]
    return "*" in tags or tag in tags


@dataclass(frozen=True)
class Opened:
    """A version of a study as the page shows it."""

    study_id: str
    patient_id: str | None
    version: int
    status: VersionStatus
    signed: bool
    signature: dict[str, Any] | None
    author: str
    created_at: str
    awaiting_reader: bool
    assigned_reader: str | None
    stored: content.Content
    etag: str
    latest: int
    signed_record: bytes | None = None
    """The signed record JSON of a signed version (it holds the comparison signed with it)."""

    @property
    def study(self) -> dict[str, Any]:
        """The study as JSON (the study-file form the page edits)."""
        return study_json(self.stored.study)


def study_json(study: Study) -> dict[str, Any]:
    value: dict[str, Any] = study.model_dump(mode="json", exclude_none=True)
    return value


_SIGNATURE_FACTS = select(
    SignatureRow.signer,
    SignatureRow.signer_name,
    SignatureRow.signed_at,
    SignatureRow.meaning,
    SignatureRow.record_sha256,
    SignatureRow.pdf_sha256,
    SignatureRow.record_json,
).where(SignatureRow.version_pk == bindparam("pk"))


def opened(session: Session, study: StudyRow, row: VersionRow, latest: int | None = None) -> Opened:
    """``row`` read for the page (inside a session)."""
    # the signature's facts and record, not its PDF (tens of KB the page does not need here)
    sig = session.execute(_SIGNATURE_FACTS, {"pk": row.id}).first()
    return Opened(
        study_id=study.study_id,
        patient_id=study.patient_id,
        version=row.version,
        status=effective_status(VersionStatus(row.status), sig is not None),
        signed=sig is not None,
        signature=None
        if sig is None
        else {
            "signer": sig.signer,
            "signer_name": sig.signer_name,
            "signed_at": sig.signed_at,
            "meaning": sig.meaning,
            "record_sha256": sig.record_sha256,
            "pdf_sha256": sig.pdf_sha256,
        },
        author=row.author,
        created_at=row.created_at,
        awaiting_reader=bool(row.awaiting_reader) and sig is None,
        assigned_reader=worklist.assigned_reader(session, study),
        stored=content.parse(bytes(row.content)),
        etag=etag(row),
        latest=latest if latest is not None else row.version,
        signed_record=bytes(sig.record_json) if sig is not None else None,
    )


def read(db: Database, study_id: str, number: int | None = None) -> Opened:
    """Version ``number`` of ``study_id`` (the latest when ``None``)."""
    with db.read() as session:
        study, row = versions.get_version(session, study_id, number)
        latest = row.version if number is None else versions.latest(session, study).version
        return opened(session, study, row, latest)


class SignedStudy(ConflictError):
    """The latest version is signed: a save cannot change it (amend it or add an addendum)."""


class Stale(ConflictError):
    """The study changed since the version the save started from; nothing was written."""

    def __init__(self, study_id: str, base: Opened | None, current: Opened) -> None:
        self.base = base
        self.current = current
        super().__init__(
            f"study {study_id}",
            f"changed since you opened it: version {current.version} was saved by "
            f"{current.author} at {current.created_at}; nothing was written",
        )


def _checked(study_id: str, study: Study) -> None:
    if study.study.id != study_id:
        raise InputError(
            "study: study.id", f"is {study.study.id}, not {study_id} (the study saved)"
        )


def create(db: Database, study: Study, who: Person, *, origin: Origin) -> Opened:
    """Store a new study (version 1); ConflictError when its id is taken."""
    _author(who)
    stored = content.build(study, {})
    content.analyse(stored, final=False)  # it must analyse, as an imported file must
    with db.write() as session:
        if versions.study_row(session, stored.study_id) is not None:
            raise ConflictError(
                f"study {stored.study_id}", "already exists; open it from the worklist instead"
            )
        row_study = StudyRow(
            study_id=stored.study_id, patient_id=stored.patient_id, created_at=now()
        )
        session.add(row_study)
        session.flush()
        row = versions.add_version(
            session,
            row_study,
            stored,
            number=1,
            parent=None,
            status=VersionStatus.PRELIMINARY,
            author=who.name,
            reason=CREATED_REASON,
            origin=origin,
            action="save",
            awaiting_reader=Role.READER not in who.roles,
        )
        return opened(session, row_study, row)


def save(
    db: Database, study_id: str, study: Study, who: Person, *, if_match: str, origin: Origin
) -> tuple[Opened, bool]:
    """Save ``study`` as a new version of ``study_id`` if ``if_match`` names its latest version.

    Returns the latest version afterwards and whether a version was written. Raises
    :class:`SignedStudy`, :class:`Stale` (see the module docstring) or a located InputError.
    """
    _author(who)
    _checked(study_id, study)
    with db.read() as session:
        known, last = versions.get_version(session, study_id, None)
        if versions.signature_of(session, last) is not None:
            raise _signed(study_id, last)
        files = content.parse(bytes(last.content)).files
        patient = known.patient_id
    if study.patient.id != patient:
        raise InputError(
            "study: patient.id",
            f"is {study.patient.id or '(none)'}; study {study_id} belongs to patient "
            f"{patient or '(none)'} in the store",
        )
    # keep the stored curve and map files the study still names
    named = {study.perfusion_curves, study.territory_map}
    stored = content.build(study, {k: v for k, v in files.items() if k in named})
    content.analyse(stored, final=False)
    with db.write() as session:
        known, last = versions.get_version(session, study_id, None)
        if versions.signature_of(session, last) is not None:
            raise _signed(study_id, last)
        if last.content_sha256 == stored.sha256:
            return opened(session, known, last), False
        if not matches(etag(last), if_match):
            base_number = tagged_version(if_match)
            base = None
            if base_number is not None and base_number < last.version:
                _, base_row = versions.get_version(session, study_id, base_number)
                base = opened(session, known, base_row, last.version)
            raise Stale(study_id, base, opened(session, known, last))
        row = versions.add_version(
            session,
            known,
            stored,
            number=last.version + 1,
            parent=last.version,
            status=VersionStatus.PRELIMINARY,
            author=who.name,
            reason=SAVED_REASON,
            origin=origin,
            action="save",
            awaiting_reader=Role.READER not in who.roles,
        )
        log.info("saved %s v%d by %s", study_id, row.version, who.name)
        return opened(session, known, row), True


def _signed(study_id: str, row: VersionRow) -> SignedStudy:
    return SignedStudy(
        f"study {study_id}",
        f"version {row.version} is signed: use Amend or Addendum (with a reason); "
        "nothing was written",
    )


def _author(who: Person) -> None:
    if not ({Role.READER, Role.SONOGRAPHER} & who.roles):
        raise StoreError(f"user {who.name}", "needs the reader or sonographer role to save a study")
