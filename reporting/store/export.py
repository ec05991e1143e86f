"""``store export``: the registry and tables ``segreport batch`` writes, from the store.

For each study the export takes its latest version (with ``final_only``, its latest signed
version; studies never signed are left out). A signed version's record is the stored, signed
record JSON; an unsigned one is analysed again from its stored content. The files are the ones
``batch --no-pdf`` writes, through the same writers (:mod:`reporting.batch`,
:mod:`reporting.export.tables`): ``<id>.record.json``, ``registry.ndjson``, ``studies.csv``,
``segments.csv`` (and Parquet with pyarrow) and ``failures.csv``; with a de-identification key
every record goes through the project's de-identification first (see :func:`_released`).

A record says only whether its report was signed (``study.report_status`` final), and a signed
record never changes, so ``versions.csv`` adds what the store alone knows: which version of each
study was exported and its status (``preliminary``, ``final``, ``amended``, ``corrected`` or
``appended``, FHIR DiagnosticReport.status), one row per exported study under the record's own
study id (the pseudonym when de-identified). The
export also writes ``chain-head.txt``, the audit chain head it was taken at, to be kept apart
from the store (``store verify --expect-head``), and adds an ``export`` event to the audit trail
naming that head.
"""

from __future__ import annotations

import contextlib
import csv
import logging
import os
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import NamedTuple

from sqlalchemy import select

from reporting.batch.aggregates import Aggregates
from reporting.batch.results import Problem, Status, StudyResult
from reporting.batch.study import record_text, registry_line
from reporting.errors import OutputError, ReportingError, problems_of
from reporting.export import tables
from reporting.files import temporary_beside, write_atomic
from reporting.results import Analysis
from reporting.settings import Settings
from reporting.store import audit, content
from reporting.store.canonical import Origin
from reporting.store.engine import Database
from reporting.store.schema import SignatureRow, StudyRow, VersionRow
from reporting.store.status import VersionStatus, effective_status

log = logging.getLogger(__name__)

HEAD_FILE = "chain-head.txt"
VERSIONS_CSV = "versions.csv"
VERSIONS_SCOPE = "versions"
"""The de-identification allow-list's scope for the columns of ``versions.csv``."""
VERSION_COLUMNS = ("study_id", "version", "version_status")
CHUNK = 128


class _Chosen(NamedTuple):
    study_id: str
    content: bytes
    record: bytes | None
    """The signed record; None for an unsigned version."""
    version: int
    status: VersionStatus


def _released(analysis: Analysis, key: bytes | None) -> Analysis:
    """The one place an export de-identifies (the project's public de-identification)."""
    if key is None:
        return analysis
    from reporting.deidentify import deidentify

    return deidentify(analysis, key)


def _chosen(db: Database, final_only: bool) -> Iterator[_Chosen]:
    """The version exported of each study, by study id."""
    with db.read() as session:
        query = (
            select(
                StudyRow.study_id,
                VersionRow.content,
                SignatureRow.record_json,
                VersionRow.version,
                VersionRow.status,
            )
            .join(VersionRow, VersionRow.study_pk == StudyRow.id)
            .outerjoin(SignatureRow, SignatureRow.version_pk == VersionRow.id)
            .order_by(StudyRow.study_id, VersionRow.version.desc())
        )
        if final_only:
            query = query.where(SignatureRow.id.is_not(None))
        last = None
        for sid, data, record, version, created_as in session.execute(query).yield_per(CHUNK):
            if sid == last:
                continue
            last = sid
            signed = record is not None
            status = effective_status(VersionStatus(created_as), signed)
            yield _Chosen(sid, bytes(data), bytes(record) if signed else None, version, status)


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


class _VersionsFile:
    """``versions.csv``, written to a temporary file and moved to its name by :meth:`commit`."""

    def __init__(self, outdir: Path, *, deidentified: bool) -> None:
        self.target = outdir / VERSIONS_CSV
        self.deidentified = deidentified
        fd, self.temp = temporary_beside(self.target)
        self.file = os.fdopen(fd, "w", encoding="utf-8", newline="")
        self.writer = csv.writer(self.file, lineterminator="\n")
        self.writer.writerow(VERSION_COLUMNS)

    def add(self, study_id: str, version: int, status: VersionStatus) -> None:
        row: tuple[object, ...] = (study_id, version, status.value)
        if self.deidentified:
            from reporting.deidentify import deidentified_row

            row = deidentified_row(VERSIONS_SCOPE, VERSION_COLUMNS, row)
        self.writer.writerow(row)

    def close(self) -> None:
        self.file.close()

    def commit(self) -> Path:
        self.file.close()
        os.replace(self.temp, self.target)
        return self.target

    def abort(self) -> None:
        self.file.close()
        with contextlib.suppress(FileNotFoundError):
            self.temp.unlink()


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
    from reporting.batch import folder

    fingerprint = None
    if key is not None:
        from reporting.deidentify import key_fingerprint

        fingerprint = key_fingerprint(key)
    # identified outputs or a de-identified extract, never both; one writer at a time (as batch)
    with folder.claimed(outdir, key is not None, fingerprint):
        written, head = _export(db, outdir, key=key, final_only=final_only, settings=settings)
        # under the lock, so no other export's files come between these and their chain head
        write_atomic(outdir / HEAD_FILE, head + "\n")
        with db.write() as session:
            # who took what out of the store, and at which head (21 CFR 11.10(e)); no paths,
            # which may name a patient, and no key
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


def _export(
    db: Database,
    outdir: Path,
    *,
    key: bytes | None,
    final_only: bool,
    settings: Settings | None,
) -> tuple[list[Path], str]:
    """The records and tables of the export, and the audit chain head they were taken at."""
    try:
        aggregates = Aggregates(outdir, _labeller(key))
    except OSError as exc:
        raise OutputError(
            str(outdir), f"cannot write the export folder: {exc.strerror or exc}"
        ) from None
    with db.read() as session:
        head = audit.chain_head(session)
    versions: _VersionsFile | None = None
    try:
        versions = _VersionsFile(outdir, deidentified=key is not None)
        with tables.TableWriter(outdir) as writer:
            studies: list[tables.Row] = []
            segments: list[tables.Row] = []
            for chosen in _chosen(db, final_only):
                try:
                    if chosen.record is not None:
                        analysis = Analysis.model_validate_json(chosen.record)
                    else:
                        analysis = content.analyse(
                            content.parse(chosen.content), final=False, settings=settings
                        )
                except ReportingError as exc:
                    failed = StudyResult(
                        source=chosen.study_id,
                        status=Status.FAILED,
                        problems=tuple(_problem(p, key) for p in problems_of(exc)),
                    )
                    aggregates.failure(failed)
                    continue
                analysis = _released(analysis, key)
                write_atomic(outdir / f"{analysis.study.id}.record.json", record_text(analysis))
                aggregates.record(registry_line(analysis))
                versions.add(analysis.study.id, chosen.version, chosen.status)
                studies.append(tables.study_row(analysis))
                segments.extend(tables.segment_rows(analysis))
                if len(studies) >= CHUNK:
                    writer.append(studies, segments)
                    studies, segments = [], []
            writer.append(studies, segments)
            versions.close()  # its last rows reach the disk before any file takes its name
            written = aggregates.commit() + writer.commit() + [versions.commit()]
    except BaseException as exc:
        aggregates.abort()
        if versions is not None:
            versions.abort()
        if isinstance(exc, OSError):  # a full disk, say: an Error: line, not a traceback
            raise OutputError(
                str(outdir), f"cannot write the export: {exc.strerror or exc}"
            ) from None
        raise
    return written, head
