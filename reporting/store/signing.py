"""Signing a version, and amendments and addenda (which make and sign a new version).

Signing re-checks the signer's password (21 CFR 11.200), refuses a temporary password and a
stale impression, renders the record JSON and the PDF of the version with the signature block
(printed name, date, time and zone, meaning, version, short record hash and the audit chain head)
and stores both with their SHA-256. The slow part (rendering) runs before the append lock; inside
it the version is checked again, so two processes signing or amending the same version at once
end with one winner and a :class:`~reporting.store.errors.ConflictError` for the other, which
wrote nothing. A signed version is never changed or signed again.
"""

from __future__ import annotations

import datetime as dt
import logging
from dataclasses import dataclass
from pathlib import Path

from sqlalchemy.orm import Session

from reporting.errors import InputError
from reporting.impression import impression_is_stale
from reporting.interop.release import MAX_REASON_CHARS, Addendum
from reporting.model import Study
from reporting.render.pdf.signature import SignatureBlock
from reporting.settings import Settings
from reporting.store import audit, content, versions, worklist
from reporting.store.canonical import Origin, now, sha256_hex
from reporting.store.engine import Database
from reporting.store.errors import AuthError, ConflictError, StoreError
from reporting.store.history import PriorStudy, compared, prior_of
from reporting.store.schema import SignatureRow, StudyRow, VersionRow
from reporting.store.status import VersionStatus, effective_status
from reporting.store.users import Person, Role

log = logging.getLogger(__name__)

DEFAULT_MEANING = "reviewed and approved as the final report"


STALE_IMPRESSION = (
    "the impression was written against earlier findings (the scores changed since); "
    "the reader must review and confirm it before signing"
)


@dataclass(frozen=True)
class Signed:
    study_id: str
    version: int
    status: VersionStatus
    record_sha256: str
    pdf_sha256: str


@dataclass(frozen=True)
class _Rendered:
    record: bytes
    pdf: bytes
    block: SignatureBlock


def _signer(who: Person) -> None:
    if Role.READER not in who.roles:
        raise AuthError(f"--as {who.name}", "only a user with the reader role can sign")
    if who.must_change_password:
        raise AuthError(
            f"--as {who.name}",
            "this password was set by an admin; change it first "
            "(`segreport store user change-password --as NAME`) before signing",
        )


def _render(
    stored: content.Content,
    who: Person,
    *,
    number: int,
    status: VersionStatus,
    meaning: str,
    head: str,
    signed_at: str,
    supersedes: int | None = None,
    reason: str | None = None,
    prior: PriorStudy | None = None,
    settings: Settings | None = None,
) -> _Rendered:
    from reporting.export.record import record_json
    from reporting.render.pdf import pdf_bytes

    analysis = compared(content.analyse(stored, final=True, settings=settings), prior)
    if impression_is_stale(analysis):
        raise StoreError(f"study {stored.study_id}", STALE_IMPRESSION)
    record = record_json(analysis).encode()
    block = SignatureBlock(
        signer_name=who.full_name,
        signer_id=who.name,
        signed_at=dt.datetime.fromisoformat(signed_at),
        meaning=meaning,
        version=number,
        status=status.value,
        record_sha256=sha256_hex(record),
        chain_head=head,
        supersedes_version=supersedes,
        reason=reason,
        addenda=tuple(Addendum(**a) for a in stored.addenda),
    )
    return _Rendered(record, pdf_bytes(analysis, signature=block), block)


def _store_signature(
    session: Session, study: StudyRow, row: VersionRow, rendered: _Rendered, *, origin: Origin
) -> Signed:
    block = rendered.block
    sig = SignatureRow(
        version_pk=row.id,
        signer=block.signer_id,
        signer_name=block.signer_name,
        signed_at=block.signed_at.isoformat(timespec="microseconds"),
        meaning=block.meaning,
        record_json=rendered.record,
        record_sha256=block.record_sha256,
        pdf=rendered.pdf,
        pdf_sha256=sha256_hex(rendered.pdf),
        chain_head=block.chain_head,
    )
    session.add(sig)
    session.flush()
    worklist.record(session, study, row, sig)
    audit.append(
        session,
        action="sign",
        actor=block.signer_id,
        origin=origin,
        study_id=study.study_id,
        version=row.version,
        detail=versions.signature_facts(sig, row),
    )
    return Signed(
        study.study_id,
        row.version,
        effective_status(VersionStatus(row.status), True),
        sig.record_sha256,
        sig.pdf_sha256,
    )


def sign(
    db: Database,
    study_id: str,
    who: Person,
    *,
    meaning: str | None = None,
    origin: Origin,
    expect_version: int | None = None,
    settings: Settings | None = None,
) -> Signed:
    """Sign the latest version of ``study_id`` (it must be unsigned; and be ``expect_version``
    when given, the version the signer saw), analysed with the lab's ``settings``."""
    _signer(who)
    meaning = _text(meaning, "--meaning") or DEFAULT_MEANING
    with db.read() as session:
        study, row = versions.get_version(session, study_id, None)
        _expected(study_id, row, expect_version)
        if versions.signature_of(session, row) is not None:
            raise StoreError(
                f"study {study_id}",
                f"version {row.version} is already signed; a signed version is never signed "
                "again (amend it: `segreport store amend`)",
            )
        stored = content.parse(row.content)
        prior = prior_of(session, stored)
        number, status, pk, head = (
            row.version,
            VersionStatus(row.status),
            row.id,
            audit.chain_head(session),
        )
    rendered = _render(
        stored,
        who,
        number=number,
        status=effective_status(status, True),
        meaning=meaning,
        head=head,
        signed_at=now(),
        prior=prior,
        settings=settings,
    )
    with db.write() as session:
        study, row = versions.get_version(session, study_id, None)
        if row.id != pk or versions.signature_of(session, row) is not None:
            raise ConflictError(
                f"study {study_id}",
                f"version {number} was changed or signed by someone else meanwhile; nothing was "
                "signed (see `segreport store history`)",
            )
        signed = _store_signature(session, study, row, rendered, origin=origin)
    log.info("signed %s v%d by %s", study_id, number, who.name)
    return signed


def amend(
    db: Database,
    study_id: str,
    who: Person,
    *,
    path: Path | None = None,
    edited: Study | None = None,
    addendum: str | None = None,
    reason: str | None = None,
    correction: bool = False,
    meaning: str | None = None,
    origin: Origin,
    expect_version: int | None = None,
    settings: Settings | None = None,
) -> Signed:
    """Make and sign a new version superseding the latest signed one: a changed study (a file at
    ``path``, or the ``edited`` study itself as the page sends it) or an addendum, analysed with
    the lab's ``settings``."""
    _signer(who)
    reason = _text(reason, "--reason")
    if reason is not None and len(reason) > MAX_REASON_CHARS:
        raise InputError("--reason", f"is {len(reason):,} characters; at most {MAX_REASON_CHARS:,}")
    addendum = _text(addendum, "--addendum")
    if [path, edited, addendum].count(None) != 2:
        raise InputError("amend", "give either a study FILE or --addendum TEXT")
    if addendum is None and reason is None:
        raise InputError("--reason", "an amendment needs a reason (--reason TEXT)")
    with db.read() as session:
        study, base = versions.get_version(session, study_id, None)
        _expected(study_id, base, expect_version)
        if versions.signature_of(session, base) is None:
            raise StoreError(
                f"study {study_id}",
                f"version {base.version} is not signed yet: import the changed file and sign it "
                "instead of amending",
            )
        old = content.parse(base.content)
        base_pk, base_number, head = base.id, base.version, audit.chain_head(session)
    signed_at = now()
    if addendum is not None:
        stored = content.with_addendum(
            old, {"text": addendum, "author": who.full_name, "at": signed_at}
        )
        status, reason = VersionStatus.APPENDED, reason or "addendum"
    else:
        if path is not None:
            stored, source = content.from_file(path), str(path)
        else:
            assert edited is not None
            source = "study"
            named = {edited.perfusion_curves, edited.territory_map}
            stored = content.build(edited, {k: v for k, v in old.files.items() if k in named})
            content.analyse(
                stored, final=False, settings=settings
            )  # it must analyse, as a file must
        _same_study(stored, old, source)
        if stored.study == old.study and stored.files == old.files:
            raise InputError(
                source, f"unchanged from the signed version {base_number}; nothing to amend"
            )
        stored = content.build(stored.study, stored.files, old.addenda)
        status = VersionStatus.CORRECTED if correction else VersionStatus.AMENDED
    number = base_number + 1
    with db.read() as session:  # the amended content's own date chooses its prior
        prior = prior_of(session, stored)
    rendered = _render(
        stored,
        who,
        number=number,
        status=status,
        meaning=_text(meaning, "--meaning") or DEFAULT_MEANING,
        head=head,
        signed_at=signed_at,
        supersedes=base_number,
        reason=reason,
        prior=prior,
        settings=settings,
    )
    with db.write() as session:
        study, current = versions.get_version(session, study_id, None)
        if current.id != base_pk:
            raise ConflictError(
                f"study {study_id}",
                f"version {base_number} was already superseded by version {current.version} "
                f"(by {current.author}); nothing was written — review it and amend again",
            )
        row = versions.add_version(
            session,
            study,
            stored,
            number=number,
            parent=base_number,
            status=status,
            author=who.name,
            reason=reason,
            origin=origin,
            action="addendum" if status is VersionStatus.APPENDED else "amend",
        )
        signed = _store_signature(session, study, row, rendered, origin=origin)
    log.info("%s %s v%d by %s", status.value, study_id, number, who.name)
    return signed


def _expected(study_id: str, row: VersionRow, expect_version: int | None) -> None:
    if expect_version is not None and row.version != expect_version:
        raise ConflictError(
            f"study {study_id}",
            f"version {row.version} (by {row.author}) is the latest now, not version "
            f"{expect_version} that you saw; nothing was written",
        )


def _same_study(new: content.Content, old: content.Content, path: Path | str) -> None:
    if new.study_id != old.study_id:
        raise InputError(f"{path}: study.id", f"is {new.study_id}, not {old.study_id}")
    if new.patient_id != old.patient_id:
        raise InputError(
            f"{path}: patient.id",
            f"is {new.patient_id or '(none)'}; the signed study belongs to {old.patient_id or '(none)'}",
        )


def _text(value: str | None, option: str) -> str | None:
    if value is None:
        return None
    value = " ".join(value.split())
    if not value:
        raise InputError(option, "must not be blank")
    return value
