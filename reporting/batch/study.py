"""One study of a batch: analyse it, write its files, report a plain :class:`StudyResult`.

:func:`process_study` is the pure per-study step: a study path and :class:`BatchOptions` in, the
study's files written atomically and a picklable result out, so a batch can be spread over worker
processes (or machines) by any scheduler. It never raises for a bad study: input problems, write
errors and bugs alike come back as a ``FAILED`` result naming the problems.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Sequence
from functools import cache
from pathlib import Path
from typing import Any

from reporting.batch import redact, stamps
from reporting.batch.claims import Claim, duplicate_problem
from reporting.batch.options import BatchOptions
from reporting.batch.results import Problem, StaleOutputs, Status, StudyResult
from reporting.batch.sources import source_name
from reporting.errors import ReportingError, problems_of
from reporting.export import tables
from reporting.export.record import record_json
from reporting.files import all_or_nothing, write_atomic
from reporting.results import Analysis
from reporting.settings import Settings, default_settings, load_settings

log = logging.getLogger(__name__)


def process_study(
    path: Path, options: BatchOptions, *, indir: Path, claim: Claim | None = None
) -> StudyResult:
    """Analyse one study and write its outputs; never raises for a bad study (returns ``FAILED``).

    Outputs: ``<id>.record.json``, the report files (SVGs and ``<id>.pdf``) when PDFs are wanted,
    ``<id>.fhir.json`` with ``fhir``; with ``deidentify`` the id is the keyed hash and no PDF is made.
    ``claim`` is what the batch's first pass found (see :mod:`reporting.batch.claims`): a study
    whose id an earlier file owns is refused before anything is written.
    """
    source = source_name(path, indir)
    label = options.file_label(source) if options.deidentify else None
    stamp: Path | None = None

    def failed(*problems: Problem) -> StudyResult:
        return _failed(source, problems, stamp, label)

    try:
        stamp = stamps.stamp_path(options, source)
        if claim is not None and claim.not_a_study is not None:
            log.info("%s: %s, not a study: left out", label or source, claim.not_a_study)
            return StudyResult(
                source, Status.IGNORED, stale=stamps.stale_outputs(stamp), label=label
            )
        if claim is not None and claim.owner is not None:
            if options.deidentify:
                assert claim.owner is not None
                return failed(redact.duplicate(options.file_label(claim.owner)))
            return failed(duplicate_problem(claim, options))
        expected = claim.study_id if claim is not None else None
        if not options.force and (claim is None or expected is not None):
            reused = stamps.reuse(path, source, stamp, options, expected_id=expected)
            if reused is not None:
                return _result(source, Status.SKIPPED, *reused)
        analysis = _analyse(Path(path), options)
        if expected is not None and analysis.study.id != expected:
            # The first pass read another id (or none): the file changed while the batch ran.
            return failed(Problem("study.id", redact.CHANGED))
        stale = stamps.stale_outputs(stamp, keep_id=analysis.study.id)
        written = _write_outputs(analysis, options)
        stamps.write_stamp(stamp, source, analysis, written, options)
        return _result(source, Status.DONE, analysis, tuple(written), stale=stale, label=label)
    except ReportingError as exc:
        # Input problems, and output write errors (reporting.files raises them as ReportingError).
        if options.deidentify:  # nothing from the input: see reporting.batch.redact
            return failed(
                *(
                    redact.cannot_write()
                    if isinstance(p, OSError)
                    else redact.invalid(_where(p, path))
                    for p in problems_of(exc)
                )
            )
        return failed(*(_problem(p, path, options.outdir) for p in problems_of(exc)))
    except OSError as exc:
        if options.deidentify:
            return failed(redact.cannot_write())
        return failed(_os_problem(exc, options.outdir))
    except Exception as exc:  # a bug must not stop the other studies
        # Reported as this study's failure; the traceback only when debugging (the CLI shows no
        # tracebacks), and never when de-identifying (it may quote input).
        if options.deidentify:
            log.debug("internal error on %s: %s", label, type(exc).__name__)
            return failed(redact.internal(exc))
        log.debug("internal error on %s", source, exc_info=True)
        return failed(Problem("", f"internal error: {type(exc).__name__}: {exc}"))


def _lab_settings(path: Path | None) -> Settings:
    """The batch's lab settings, read once per worker while the file stays the same."""
    if path is None:
        return default_settings()
    try:
        info = path.stat()
    except OSError:
        return load_settings(path)  # says what is wrong with it, located
    return _settings_of(path, (info.st_ino, info.st_size, info.st_mtime_ns))


@cache
def _settings_of(path: Path, _version: tuple[int, int, int]) -> Settings:
    return load_settings(path)


def _analyse(path: Path, options: BatchOptions) -> Analysis:
    from reporting.analysis import analyze_file

    analysis = analyze_file(
        path,
        territory_map=options.territory_map,
        settings=_lab_settings(options.settings_path),
    )
    if options.deidentify:
        from reporting.deidentify import deidentify

        assert options.deid_key is not None
        analysis = deidentify(analysis, options.deid_key, keep_text=options.keep_text)
    return analysis


def record_text(analysis: Analysis) -> str:
    """The record file's text: the same as :func:`~reporting.export.record.record_json`."""
    return record_json(analysis)


def registry_line(analysis: Analysis) -> str:
    """The record as one line of compact JSON (no newline), from pydantic's fast serializer."""
    return analysis.model_dump_json()


def _write_outputs(analysis: Analysis, options: BatchOptions) -> dict[str, str]:
    """Write the study's files; return their names (in writing order) with their digests."""
    outdir = options.outdir
    sid = analysis.study.id
    record = outdir / f"{sid}.record.json"
    pdf_path = outdir / f"{sid}.pdf"
    fhir_path = outdir / f"{sid}.fhir.json"
    written: dict[Path, bytes] = {}
    with all_or_nothing([record, pdf_path, fhir_path]):
        if options.writes_pdf:
            # The report writer writes the record, the SVG maps and the PDF (all or none).
            paths = _report_writer()(
                analysis, outdir, paper=options.paper, templates_dir=options.templates_dir
            )
            written.update((Path(p), Path(p).read_bytes()) for p in paths)
        if record not in written:
            text = record_text(analysis).encode()
            write_atomic(record, text)
            written = {record: text, **written}
        if options.fhir:
            from reporting.export.fhir import bundle_json

            # the lab's code and identifier systems come from its settings file, as in `fhir`
            settings = _lab_settings(options.settings_path)
            bundle = bundle_json(analysis, pdf=written.get(pdf_path), settings=settings).encode()
            write_atomic(fhir_path, bundle)
            written[fhir_path] = bundle
    return {p.relative_to(outdir).as_posix(): stamps.digest(b) for p, b in written.items()}


def _report_writer() -> Any:
    # Imported only when PDFs are wanted: the renderer pulls in reportlab and the templates.
    import importlib

    return importlib.import_module("reporting.render").write_report


def _result(
    source: str,
    status: Status,
    analysis: Analysis,
    outputs: Sequence[str],
    *,
    stale: StaleOutputs | None = None,
    label: str | None = None,
) -> StudyResult:
    return StudyResult(
        source=source,
        status=status,
        study_id=analysis.study.id,
        outputs=tuple(outputs),
        record_line=registry_line(analysis),
        study_row=tables.study_row(analysis),
        segment_rows=tuple(tables.segment_rows(analysis)),
        stale=stale,
        label=label,
    )


def _failed(
    source: str, problems: tuple[Problem, ...], stamp: Path | None, label: str | None
) -> StudyResult:
    # An earlier run's files of a failed study must not stay behind: the driver removes them.
    stale = stamps.stale_outputs(stamp) if stamp is not None else None
    return StudyResult(
        source=source, status=Status.FAILED, problems=problems, stale=stale, label=label
    )


def _where(problem: ReportingError, path: Path) -> str:
    # The location inside the study file (the file's own path left out).
    location: str = getattr(problem, "location", "")
    prefix = str(path)
    if location.startswith(prefix):
        location = location[len(prefix) :].lstrip(":").strip()
    return location


def _problem(problem: ReportingError, path: Path, outdir: Path) -> Problem:
    location = _where(problem, path)
    message = getattr(problem, "problem", str(problem))
    # Output files are named relative to the output folder, as in the rest of the batch's outputs.
    folder = f"{outdir}{os.sep}"
    return Problem(location.replace(folder, ""), message.replace(folder, ""))


def _os_problem(exc: OSError, outdir: Path) -> Problem:
    # Names the file relative to the output folder: the folder itself is the operator's choice.
    where = ""
    if exc.filename is not None:
        name = Path(str(exc.filename))
        where = name.relative_to(outdir).as_posix() if name.is_relative_to(outdir) else str(name)
    return Problem("", f"cannot write {where or 'the outputs'}: {exc.strerror or exc}")
