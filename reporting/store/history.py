"""Reading the store: a study's history, one version's files, and the patient's prior study.

:func:`prior_signed` answers "the latest earlier signed study of the same patient" with one query
on indexed columns (``studies.patient_id``, ``versions.study_pk``, ``versions.study_date``,
``signatures.version_pk``); issue #6's comparison builds on it.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from reporting.files import all_or_nothing, write_atomic
from reporting.store import content, versions
from reporting.store.engine import Database
from reporting.store.schema import EventRow, SignatureRow, StudyRow, VersionRow
from reporting.store.status import VersionStatus, effective_status


def history(db: Database, study_id: str) -> dict[str, Any]:
    """Versions, signatures and events of ``study_id`` (the ``store history --json`` shape)."""
    with db.read() as session:
        study, _ = versions.get_version(session, study_id, None)
        rows = session.execute(
            select(VersionRow, SignatureRow)
            .outerjoin(SignatureRow, SignatureRow.version_pk == VersionRow.id)
            .where(VersionRow.study_pk == study.id)
            .order_by(VersionRow.version)
        ).all()
        events = session.scalars(
            select(EventRow).where(EventRow.study_id == study_id).order_by(EventRow.seq)
        ).all()
        return {
            "study_id": study_id,
            "patient_id": study.patient_id,
            "versions": [_version(v, s) for v, s in rows],
            "events": [
                {
                    "seq": e.seq,
                    "at": e.at,
                    "actor": e.actor,
                    "action": e.action,
                    "version": e.version,
                    "origin": e.origin,
                    "host": e.host,
                }
                for e in events
            ],
        }


def _version(v: VersionRow, s: SignatureRow | None) -> dict[str, Any]:
    return {
        "version": v.version,
        "parent_version": v.parent_version,
        "status": effective_status(VersionStatus(v.status), s is not None).value,
        "author": v.author,
        "created_at": v.created_at,
        "reason": v.reason,
        "content_sha256": v.content_sha256,
        "signature": None
        if s is None
        else {
            "signer": s.signer,
            "signer_name": s.signer_name,
            "signed_at": s.signed_at,
            "meaning": s.meaning,
            "record_sha256": s.record_sha256,
            "pdf_sha256": s.pdf_sha256,
        },
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


def show(db: Database, study_id: str, number: int | None, outdir: Path) -> list[Path]:
    """Write a version's study content, record and PDF into ``outdir``; a signed version's
    record and PDF are the stored bytes, byte for byte."""
    with db.read() as session:
        _, row = versions.get_version(session, study_id, number)
        sig = versions.signature_of(session, row)
        data, number = bytes(row.content), row.version
        signed = (bytes(sig.record_json), bytes(sig.pdf)) if sig is not None else None
    stem = outdir / f"{study_id}.v{number}"
    if signed is None:
        from reporting.export.record import record_json
        from reporting.render.pdf import pdf_bytes

        analysis = content.analyse(content.parse(data), final=False)
        signed = (record_json(analysis).encode(), pdf_bytes(analysis))
    paths = [Path(f"{stem}.study.json"), Path(f"{stem}.record.json"), Path(f"{stem}.pdf")]
    with all_or_nothing(paths):
        for path, payload in zip(paths, (data, *signed), strict=True):
            write_atomic(path, payload)
    return paths


@dataclass(frozen=True)
class PriorStudy:
    """A patient's earlier signed study."""

    study_id: str
    version: int
    study_date: dt.date
    record_json: bytes


def prior_signed(session: Session, patient_id: str, before: dt.date) -> PriorStudy | None:
    """The latest signed study of ``patient_id`` dated before ``before`` (its newest signed version)."""
    row = session.execute(
        select(
            StudyRow.study_id, VersionRow.version, VersionRow.study_date, SignatureRow.record_json
        )
        .join(VersionRow, VersionRow.study_pk == StudyRow.id)
        .join(SignatureRow, SignatureRow.version_pk == VersionRow.id)
        .where(StudyRow.patient_id == patient_id, VersionRow.study_date < before.isoformat())
        .order_by(VersionRow.study_date.desc(), VersionRow.id.desc())
        .limit(1)
    ).first()
    if row is None:
        return None
    return PriorStudy(row[0], row[1], dt.date.fromisoformat(row[2]), bytes(row[3]))


def prior_for(db: Database, study_id: str) -> PriorStudy | None:
    """The prior study of ``study_id`` (by its latest version's date), if any."""
    with db.read() as session:
        study, row = versions.get_version(session, study_id, None)
        if study.patient_id is None or row.study_date is None:
            return None
        return prior_signed(session, study.patient_id, dt.date.fromisoformat(row.study_date))
