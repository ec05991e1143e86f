"""``store export``: the registry and tables ``segreport batch`` writes, from the store.

For each study the export takes its latest version (with ``final_only``, its latest signed
version; studies never signed are left out). A signed version's record is the stored, signed
record JSON; an unsigned one is analysed again from its stored content. The files are the ones
``batch --no-pdf`` writes, through the same writers (:mod:`reporting.batch`,
:mod:`reporting.export.tables`): ``<id>.record.json``, ``registry.ndjson``, ``studies.csv``,
``segments.csv`` (and Parquet with pyarrow) and ``failures.csv``; with a de-identification key
every record goes through the project's de-identification first (see :func:`_released`). The
export also writes ``chain-head.txt``, the audit chain head it was taken at, to be kept apart
from the store (``store verify --expect-head``), and adds an ``export`` event to the audit trail
naming that head.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Iterator
from pathlib import Path

from sqlalchemy import select

from reporting.batch.aggregates import Aggregates
from reporting.batch.results import Problem, Status, StudyResult
from reporting.batch.study import record_text, registry_line
from reporting.errors import OutputError, ReportingError, problems_of
from reporting.export import tables
from reporting.files import write_atomic
from reporting.results import Analysis
from reporting.settings import Settings
from reporting.store import audit, content
from reporting.store.canonical import Origin
from reporting.store.engine import Database
from reporting.store.schema import SignatureRow, StudyRow, VersionRow

log = logging.getLogger(__name__)

HEAD_FILE = "chain-head.txt"
CHUNK = 128


def _released(analysis: Analysis, key: bytes | None) -> Analysis:
    """The one place an export de-identifies (the project's public de-identification)."""
    if key is None:
        return analysis
    from reporting.deidentify import deidentify

    return deidentify(analysis, key)


def _chosen(db: Database, final_only: bool) -> Iterator[tuple[str, bytes, bytes | None]]:
    """(study id, content bytes, signed record or None) of each exported study, by study id."""
    with db.read() as session:
        query = (
            select(
                StudyRow.study_id, VersionRow.content, SignatureRow.record_json, VersionRow.version
            )
            .join(VersionRow, VersionRow.study_pk == StudyRow.id)
            .outerjoin(SignatureRow, SignatureRow.version_pk == VersionRow.id)
            .order_by(StudyRow.study_id, VersionRow.version.desc())
        )
        if final_only:
            query = query.where(SignatureRow.id.is_not(None))
        last = None
        for sid, data, record, _ in session.execute(query).yield_per(CHUNK):
            if sid == last:
                continue
            last = sid
            yield sid, bytes(data), bytes(record) if record is not None else None


def _labeller(key: bytes | None) -> Callable[[str], str]:
    """How the export names a failing study: its id, or a keyed hash of it when de-identifying."""
    if key is None:
        return str
    from reporting.deidentify import keyed_hash

    return lambda sid: "F-" + keyed_hash(key, "source", sid)


def _problem(problem: ReportingError, key: bytes | None) -> Problem:
    """A stored study's problem; nothing from the input when de-identifying (as batch does)."""
    if key is None:
        return Problem("", str(problem))
    from reporting.batch import redact

    return redact.invalid(getattr(problem, "location", ""))


def export(
    db: Database,
    outdir: Path,
    *,
    key: bytes | None = None,
    final_only: bool = False,
    settings: Settings | None = None,
) -> list[Path]:
    """Write the export into ``outdir``; return the aggregate files written. A signed version is
    its signed record; an unsigned one is analysed with the lab's ``settings``."""
    try:
        outdir.mkdir(parents=True, exist_ok=True)
        aggregates = Aggregates(outdir, _labeller(key))
    except OSError as exc:
        raise OutputError(
            str(outdir), f"cannot write the export folder: {exc.strerror or exc}"
        ) from None
    with db.read() as session:
        head = audit.chain_head(session)
    try:
        with tables.TableWriter(outdir) as writer:
            studies: list[tables.Row] = []
            segments: list[tables.Row] = []
            for sid, data, record in _chosen(db, final_only):
                try:
                    if record is not None:
                        analysis = Analysis.model_validate_json(record)
                    else:
                        analysis = content.analyse(
                            content.parse(data), final=False, settings=settings
                        )
                except ReportingError as exc:
                    failed = StudyResult(
                        source=sid,
                        status=Status.FAILED,
                        problems=tuple(_problem(p, key) for p in problems_of(exc)),
                    )
                    aggregates.failure(failed)
                    continue
                analysis = _released(analysis, key)
                write_atomic(outdir / f"{analysis.study.id}.record.json", record_text(analysis))
                aggregates.record(registry_line(analysis))
                studies.append(tables.study_row(analysis))
                segments.extend(tables.segment_rows(analysis))
                if len(studies) >= CHUNK:
                    writer.append(studies, segments)
                    studies, segments = [], []
            writer.append(studies, segments)
            written = aggregates.commit() + writer.commit()
    except BaseException:
        aggregates.abort()
        raise
    write_atomic(outdir / HEAD_FILE, head + "\n")
    with db.write() as session:
        # who took what out of the store, and at which head (21 CFR 11.10(e)); no paths, which
        # may name a patient, and no key
        audit.append(
            session,
            action="export",
            actor=None,
            origin=Origin.CLI,
            detail={
                "deidentified": key is not None,
                "final_only": final_only,
                "files": len(written) + 1,
                "chain_head": head,
            },
        )
    log.info("exported the store into %s at chain head %s", outdir, head)
    return [*written, outdir / HEAD_FILE]
