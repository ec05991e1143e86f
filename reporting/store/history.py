"""Reading the store: a study's history, one version's files, and the patient's prior study.

:func:`prior_signed` answers "the latest earlier signed study of the same patient" with one query
on indexed columns (``studies.patient_id``, ``versions.study_pk``, ``versions.study_date``,
``signatures.version_pk``); :func:`compared` adds the comparison with it (:mod:`reporting.comparison`)
to a version's analysis before it is shown or signed.
"""

from __future__ import annotations

import datetime as dt
import threading
from collections import OrderedDict
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy import bindparam, select
from sqlalchemy.engine import Connection
from sqlalchemy.orm import Session

from reporting.files import all_or_nothing, write_atomic
from reporting.results import Analysis
from reporting.settings import Settings
from reporting.store import content, versions
from reporting.store.canonical import sha256_hex
from reporting.store.engine import Database
from reporting.store.errors import IntegrityFailure, NotFound
from reporting.store.schema import EventRow, SignatureRow, StudyRow, VersionRow
from reporting.store.status import VersionStatus, effective_status

VERSION_COLUMNS = (
    VersionRow.version,
    VersionRow.parent_version,
    VersionRow.status,
    VersionRow.author,
    VersionRow.created_at,
    VersionRow.reason,
    VersionRow.content_sha256,
)
SIGNATURE_COLUMNS = (
    SignatureRow.id,
    SignatureRow.signer,
    SignatureRow.signer_name,
    SignatureRow.signed_at,
    SignatureRow.meaning,
    SignatureRow.record_sha256,
    SignatureRow.pdf_sha256,
)
EVENT_COLUMNS = (
    EventRow.seq,
    EventRow.at,
    EventRow.actor,
    EventRow.action,
    EventRow.version,
    EventRow.origin,
    EventRow.host,
)


_STUDY = select(StudyRow.id, StudyRow.patient_id).where(StudyRow.study_id == bindparam("sid"))
_VERSIONS = (
    select(*VERSION_COLUMNS, *SIGNATURE_COLUMNS)
    .outerjoin(SignatureRow, SignatureRow.version_pk == VersionRow.id)
    .where(VersionRow.study_pk == bindparam("pk"))
    .order_by(VersionRow.version)
)
_EVENTS = select(*EVENT_COLUMNS).where(EventRow.study_id == bindparam("sid")).order_by(EventRow.seq)


def history(db: Database, study_id: str) -> dict[str, Any]:
    """Versions, signatures and events of ``study_id`` (the ``store history --json`` shape).

    Three indexed queries through SQLAlchemy Core with statements built once (a lookup costs
    little more than the database's own work).
    """
    with db.connect() as conn:
        study = conn.execute(_STUDY, {"sid": study_id}).first()
        if study is None:
            raise NotFound(f"study {study_id}", "not in the store")
        rows = conn.execute(_VERSIONS, {"pk": study[0]}).all()
        events = conn.execute(_EVENTS, {"sid": study_id}).all()
    return {
        "study_id": study_id,
        "patient_id": study[1],
        "versions": [_version(row) for row in rows],
        "events": [
            dict(zip(("seq", "at", "actor", "action", "version", "origin", "host"), e, strict=True))
            for e in events
        ],
    }


def _version(row: Any) -> dict[str, Any]:
    (number, parent, status, author, created, reason, digest, sig_id, *sig) = row
    signed = sig_id is not None
    return {
        "version": number,
        "parent_version": parent,
        "status": effective_status(VersionStatus(status), signed).value,
        "author": author,
        "created_at": created,
        "reason": reason,
        "content_sha256": digest,
        "signature": dict(
            zip(
                ("signer", "signer_name", "signed_at", "meaning", "record_sha256", "pdf_sha256"),
                sig,
                strict=True,
            )
        )
        if signed
        else None,
    }


def history_text(data: dict[str, Any]) -> str:
    """The history as lines for a terminal."""
    lines = [f"Study {data['study_id']} (patient {data['patient_id'] or 'not given'})", "Versions:"]
    for v in data["versions"]:
        sig = v["signature"]
        signed = (
            f"; signed by {sig['signer']} at {sig['signed_at']} ({sig['meaning']})" if sig else ""
        )
        lines.append(
            f"  v{v['version']} {v['status']}: {v['author']} at {v['created_at']}, "
            f"{v['reason']}; content {v['content_sha256'][:12]}{signed}"
        )
    lines.append("Events:")
    lines += [
        f"  #{e['seq']} {e['at']} {e['actor'] or '-'} {e['action']}"
        + (f" v{e['version']}" if e["version"] else "")
        + f" ({e['origin']}, {e['host']})"
        for e in data["events"]
    ]
    return "\n".join(lines) + "\n"


def show(
    db: Database,
    study_id: str,
    number: int | None,
    outdir: Path,
    *,
    settings: Settings | None = None,
) -> list[Path]:
    """Write a version's study content, record and PDF into ``outdir``; a signed version's
    record and PDF are the stored bytes, byte for byte; an unsigned one is analysed with the
    lab's ``settings``."""
    with db.read() as session:
        _, row = versions.get_version(session, study_id, number)
        sig = versions.signature_of(session, row)
        data, number = bytes(row.content), row.version
        signed = (bytes(sig.record_json), bytes(sig.pdf)) if sig is not None else None
        stored = content.parse(data) if sig is None else None
        prior = prior_of(session, stored) if stored is not None else None
    stem = outdir / f"{study_id}.v{number}"
    if signed is None:
        from reporting.export.record import record_json
        from reporting.render.pdf import pdf_bytes

        assert stored is not None
        analysis = compared(content.analyse(stored, final=False, settings=settings), prior)
        signed = (record_json(analysis).encode(), pdf_bytes(analysis))
    paths = [Path(f"{stem}.study.json"), Path(f"{stem}.record.json"), Path(f"{stem}.pdf")]
    with all_or_nothing(paths):
        for path, payload in zip(paths, (data, *signed), strict=True):
            write_atomic(path, payload)
    return paths


@dataclass(frozen=True)
class PriorStudy:
    """A patient's earlier signed study, with its signed record read back."""

    study_id: str
    version: int
    study_date: dt.date
    record: Analysis


def _prior_query(patient_id: Any, before: Any) -> Any:
    return (
        select(
            StudyRow.study_id,
            VersionRow.version,
            VersionRow.study_date,
            SignatureRow.id,
            SignatureRow.record_sha256,
        )
        .join(VersionRow, VersionRow.study_pk == StudyRow.id)
        .join(SignatureRow, SignatureRow.version_pk == VersionRow.id)
        .where(StudyRow.patient_id == patient_id, VersionRow.study_date < before)
        .order_by(VersionRow.study_date.desc(), VersionRow.id.desc())
        .limit(1)
    )


_RECORD_BYTES = select(SignatureRow.record_json).where(SignatureRow.id == bindparam("pk"))
_RECORDS: OrderedDict[str, Analysis] = OrderedDict()
_RECORDS_KEPT = 256
_records_lock = threading.Lock()


def _signed_record(executor: Session | Connection, pk: int, sha256: str) -> Analysis:
    """The signed record of signature ``pk`` as an :class:`Analysis`, kept by its SHA-256.

    A signed record never changes (the table is append-only), so the lab server reads and parses
    each prior once, not on every live analysis; keyed by the record's own hash, a record read
    back always is the one signed. Bytes that do not match their hash are refused, not cached.
    """
    with _records_lock:
        found = _RECORDS.get(sha256)
        if found is not None:
            _RECORDS.move_to_end(sha256)
            return found
    data = bytes(executor.execute(_RECORD_BYTES, {"pk": pk}).scalar_one())
    if sha256_hex(data) != sha256:
        raise IntegrityFailure(
            f"signature {pk}", "the stored record does not match its SHA-256 (altered)"
        )
    record = Analysis.model_validate_json(data)
    with _records_lock:
        _RECORDS[sha256] = record
        while len(_RECORDS) > _RECORDS_KEPT:
            _RECORDS.popitem(last=False)
    return record


def _prior(executor: Session | Connection, row: Any) -> PriorStudy | None:
    if row is None:
        return None
    study_id, version, date, pk, sha256 = row
    record = _signed_record(executor, pk, sha256)
    return PriorStudy(study_id, version, dt.date.fromisoformat(date), record)


_PRIOR_SIGNED = _prior_query(bindparam("patient"), bindparam("before"))
"""Built once: building the statement costs more than running it (about 1.7 ms of CPU)."""


def prior_signed(session: Session, patient_id: str, before: dt.date) -> PriorStudy | None:
    """The latest signed study of ``patient_id`` dated before ``before`` (its newest signed version).

    One query on indexed columns: the patient's studies (``studies.patient_id``), their versions
    (``versions.study_pk``) and signatures (``signatures.version_pk``), newest date first.
    """
    row = session.execute(
        _PRIOR_SIGNED, {"patient": patient_id, "before": before.isoformat()}
    ).first()
    return _prior(session, row)


def _prior_for_statement() -> Any:
    me = (
        select(StudyRow.patient_id, VersionRow.study_date)
        .join(VersionRow, VersionRow.study_pk == StudyRow.id)
        .where(StudyRow.study_id == bindparam("sid"))
        .order_by(VersionRow.version.desc())
        .limit(1)
        .subquery()
    )
    return _prior_query(
        select(me.c.patient_id).scalar_subquery(), select(me.c.study_date).scalar_subquery()
    )


_PRIOR_FOR = _prior_for_statement()


def prior_of(session: Session, stored: content.Content) -> PriorStudy | None:
    """The prior study of a stored version's content (none without a patient id or a date)."""
    patient, date = stored.patient_id, stored.study.study.date
    if patient is None or date is None:
        return None
    return prior_signed(session, patient, date)


def compared(analysis: Analysis, prior: PriorStudy | None) -> Analysis:
    """``analysis`` with its comparison to the stored prior's signed record (when there is one)."""
    if prior is None:
        return analysis
    from reporting.comparison import with_comparison

    where = f"prior study {prior.study_id} v{prior.version}"
    return with_comparison(analysis, prior.record, location=where)


def prior_for(db: Database, study_id: str) -> PriorStudy | None:
    """The prior study of ``study_id`` (by its latest version's date), if any: one query."""
    with db.connect() as conn:
        return _prior(conn, conn.execute(_PRIOR_FOR, {"sid": study_id}).first())
