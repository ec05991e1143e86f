"""Batch processing: every study file under a folder, per-study outputs, a registry and tables.

:func:`process_study` is the pure per-study step (a study path and :class:`BatchOptions` in; the
study's files written atomically and a picklable :class:`StudyResult` out), so a batch can later be
spread over machines by any scheduler. :func:`run_batch` drives it over a folder with N worker
processes and streams the results, in the sorted order of the input paths whatever the number of
workers, into ``registry.ndjson``, ``studies.csv``, ``segments.csv`` (and Parquet when pyarrow is
importable) and ``failures.csv``. Aggregate files go through temporary files renamed at the end, and
per-study files through :func:`~reporting.files.write_atomic`, so an interrupted run leaves no
half-written file. A bookkeeping stamp per study (``.segreport-batch/``) lets a re-run skip studies
whose outputs are newer than their input and were made with the same options; a skipped study's
record is read back, so the registry and tables always cover every study.
"""

from __future__ import annotations

import contextlib
import csv
import functools
import hashlib
import json
import logging
import os
import re
import tempfile
from collections import deque
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import Future, ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from enum import StrEnum
from pathlib import Path
from typing import IO, Any

from reporting.errors import ReportingError, problems_of
from reporting.export import tables
from reporting.export.record import record_dict
from reporting.files import all_or_nothing, write_atomic
from reporting.load import STUDY_SUFFIXES
from reporting.results import Analysis
from reporting.segments import BUILT_IN_MAPS

log = logging.getLogger(__name__)

REGISTRY = "registry.ndjson"
FAILURES = "failures.csv"
STAMPS = ".segreport-batch"
"""Folder (inside the output folder) of per-study bookkeeping stamps used to skip on re-runs."""
CHUNK_STUDIES = 128
"""Studies per table chunk (and Parquet row group); fixed so output bytes never depend on timing."""
TASK_STUDIES = 8
"""Studies per task sent to a worker process."""
IN_FLIGHT_PER_JOB = 4
"""Tasks queued per worker: enough to keep workers busy, small enough to bound memory."""
FAILURE_COLUMNS = ("file", "location", "message")
OUTPUT_SUFFIXES = (".record.json", ".fhir.json")


class Status(StrEnum):
    """Outcome of one study in a batch."""

    DONE = "done"
    """Analysed and its outputs written."""
    SKIPPED = "skipped"
    """Outputs newer than the input and made with the same options: not redone."""
    FAILED = "failed"
    """The study could not be analysed or written; see the problems."""


@dataclass(frozen=True)
class Problem:
    """One problem of a failed study: where in the file and what."""

    location: str
    message: str


@dataclass(frozen=True)
class BatchOptions:
    """What a batch writes. ``deid_key`` is required with ``deidentify`` (see :mod:`reporting.deidentify`)."""

    outdir: Path
    pdf: bool = True
    fhir: bool = False
    deidentify: bool = False
    deid_key: bytes | None = field(default=None, repr=False)
    keep_text: bool = False
    force: bool = False
    settings_path: Path | None = None
    territory_map: str | None = None
    paper: str = "A4"
    templates_dir: Path | None = None

    def __post_init__(self) -> None:
        if self.deidentify and not self.deid_key:
            raise ReportingError(
                "de-identification needs a key (see reporting.deidentify.load_key)"
            )

    @property
    def writes_pdf(self) -> bool:
        """PDFs are written unless turned off or de-identifying (a report shows identifiers)."""
        return self.pdf and not self.deidentify

    @functools.cached_property
    def fingerprint(self) -> str:
        """A digest of everything that changes the outputs, stored in each study's stamp."""
        from reporting import __version__
        from reporting.deidentify import key_fingerprint

        settings_stamp = map_stamp = None
        if self.settings_path is not None:
            with contextlib.suppress(OSError):
                settings_stamp = [str(self.settings_path), self.settings_path.stat().st_mtime_ns]
        if self.territory_map is not None and self.territory_map not in BUILT_IN_MAPS:
            with contextlib.suppress(OSError):
                map_stamp = Path(self.territory_map).stat().st_mtime_ns
        parts = {
            "version": __version__,
            "pdf": self.writes_pdf,
            "fhir": self.fhir,
            "deidentify": self.deidentify,
            "key": key_fingerprint(self.deid_key) if self.deidentify and self.deid_key else None,
            "keep_text": self.keep_text,
            "settings": settings_stamp,
            "territory_map": [self.territory_map, map_stamp],
            "paper": self.paper,
            "templates": str(self.templates_dir) if self.templates_dir else None,
        }
        return hashlib.sha256(json.dumps(parts, sort_keys=True).encode()).hexdigest()[:32]


@dataclass(frozen=True)
class StudyResult:
    """What :func:`process_study` reports for one study (plain data, cheap to pickle)."""

    source: str
    """Path of the study file relative to the input folder (POSIX form)."""
    status: Status
    study_id: str | None = None
    outputs: tuple[str, ...] = ()
    """Names of the study's files in the output folder."""
    record_line: str | None = None
    """The record as one line of compact JSON (for ``registry.ndjson``)."""
    study_row: tables.Row | None = None
    segment_rows: tuple[tables.Row, ...] = ()
    problems: tuple[Problem, ...] = ()


@dataclass(frozen=True)
class BatchSummary:
    """Counts of a finished batch and the aggregate files written."""

    total: int
    done: int
    skipped: int
    failed: int
    written: tuple[Path, ...]

    @property
    def ok(self) -> bool:
        """True when no study failed."""
        return self.failed == 0

    def line(self) -> str:
        """``"210 studies: 200 done, 0 skipped, 10 failed"``."""
        return (
            f"{self.total} stud{'y' if self.total == 1 else 'ies'}: {self.done} done, "
            f"{self.skipped} skipped, {self.failed} failed"
        )


class BatchInterrupted(ReportingError):
    """The batch stopped before the end (a worker process died); re-run to complete it."""


ProgressCallback = Callable[[StudyResult], None]


def find_studies(indir: Path, *, exclude: Path | None = None) -> list[Path]:
    """Every ``*.yaml``, ``*.yml`` and ``*.json`` file under ``indir`` (recursive), in a stable order.

    Hidden files and folders (names starting with a dot), files a batch writes (``*.record.json``,
    ``*.fhir.json``) and anything inside ``exclude`` (the output folder, when it lies under
    ``indir``) are left out, so a batch never reads its own outputs back as studies.
    """
    indir = Path(indir)
    if not indir.is_dir():
        raise ReportingError(f"{indir}: not a folder")
    skip = exclude.resolve() if exclude is not None else None
    if skip is not None and skip == indir.resolve():
        skip = None
    found = []
    for p in indir.rglob("*"):
        if p.suffix.lower() not in STUDY_SUFFIXES or p.name.endswith(OUTPUT_SUFFIXES):
            continue
        if any(part.startswith(".") for part in p.relative_to(indir).parts):
            continue
        if skip is not None and p.resolve().is_relative_to(skip):
            continue
        if p.is_file():
            found.append(p)
    return sorted(found, key=lambda p: p.relative_to(indir).as_posix())


# --- one study --------------------------------------------------------------------------------------


def process_study(path: Path, options: BatchOptions, *, indir: Path) -> StudyResult:
    """Analyse one study and write its outputs; never raises for a bad study (returns ``FAILED``).

    Outputs: ``<id>.record.json``, the report files (SVGs and ``<id>.pdf``) when PDFs are wanted,
    ``<id>.fhir.json`` with ``fhir``; with ``deidentify`` the id is the keyed hash and no PDF is made.
    """
    source = Path(path).relative_to(indir).as_posix()
    try:
        stamp = _stamp_path(options, source)
        if not options.force:
            reused = _reuse(path, source, stamp, options)
            if reused is not None:
                return reused
        analysis = _analyse(Path(path), options)
        data = record_dict(analysis)
        outputs = _write_outputs(analysis, data, options)
        _write_stamp(stamp, source, analysis, outputs, options)
        return _result(source, Status.DONE, analysis, outputs, data)
    except ReportingError as exc:
        return StudyResult(
            source=source,
            status=Status.FAILED,
            problems=tuple(_problem(p, path) for p in problems_of(exc)),
        )
    except Exception as exc:  # a bug must not stop the other studies
        # Reported as this study's failure; the traceback only when debugging (the CLI shows no tracebacks).
        log.debug("internal error on %s", source, exc_info=True)
        return StudyResult(
            source=source,
            status=Status.FAILED,
            problems=(Problem("", f"internal error: {type(exc).__name__}: {exc}"),),
        )


def _analyse(path: Path, options: BatchOptions) -> Analysis:
    from reporting.analysis import analyze_file

    analysis = analyze_file(
        path, settings_path=options.settings_path, territory_map=options.territory_map
    )
    if options.deidentify:
        from reporting.deidentify import deidentify

        assert options.deid_key is not None
        analysis = deidentify(analysis, options.deid_key, keep_text=options.keep_text)
    return analysis


def record_text(data: dict[str, Any]) -> str:
    """The record file's text from :func:`~reporting.export.record.record_dict` data.

    Byte-identical to :func:`~reporting.export.record.record_json` (a test checks it); taking the
    data lets a batch dump the model once for both the record file and the registry line.
    """
    return json.dumps(data, indent=2, ensure_ascii=False) + "\n"


def registry_line(data: dict[str, Any]) -> str:
    """The record as one line of compact JSON (no newline)."""
    return json.dumps(data, ensure_ascii=False, separators=(",", ":"))


def _write_outputs(
    analysis: Analysis, data: dict[str, Any], options: BatchOptions
) -> tuple[str, ...]:
    outdir = options.outdir
    sid = analysis.study.id
    record = outdir / f"{sid}.record.json"
    pdf_path = outdir / f"{sid}.pdf"
    fhir_path = outdir / f"{sid}.fhir.json"
    written: list[Path] = []
    with all_or_nothing([record, pdf_path, fhir_path]):
        pdf: bytes | None = None
        if options.writes_pdf:
            # The report writer writes the record, the SVG maps and the PDF (all or none).
            paths = _report_writer()(
                analysis, outdir, paper=options.paper, templates_dir=options.templates_dir
            )
            written += [Path(p) for p in paths]
            if pdf_path.exists():
                pdf = pdf_path.read_bytes()
        if record not in written:
            write_atomic(record, record_text(data))
            written.insert(0, record)
        if options.fhir:
            from reporting.export.fhir import bundle_json

            write_atomic(fhir_path, bundle_json(analysis, pdf=pdf))
            written.append(fhir_path)
    return tuple(p.relative_to(outdir).as_posix() for p in written)


def _report_writer() -> Any:
    # Imported only when PDFs are wanted: the renderer pulls in reportlab and the templates.
    import importlib

    return importlib.import_module("reporting.render").write_report


def _result(
    source: str,
    status: Status,
    analysis: Analysis,
    outputs: Sequence[str],
    data: dict[str, Any] | None = None,
) -> StudyResult:
    return StudyResult(
        source=source,
        status=status,
        study_id=analysis.study.id,
        outputs=tuple(outputs),
        record_line=registry_line(record_dict(analysis) if data is None else data),
        study_row=tables.study_row(analysis),
        segment_rows=tuple(tables.segment_rows(analysis)),
    )


_QUOTED = re.compile(r"'[^']*'|\"[^\"]*\"")


def _problem(problem: ReportingError, path: Path) -> Problem:
    location = getattr(problem, "location", "")
    message = getattr(problem, "problem", str(problem))
    prefix = str(path)
    if location.startswith(prefix):
        location = location[len(prefix) :].lstrip(":").strip()
    return Problem(location, message)


def _redacted(text: str) -> str:
    # Problem messages quote input values, which may be identifiers.
    return _QUOTED.sub("'…'", text)


# --- re-run bookkeeping -------------------------------------------------------------------------------


def _stamp_path(options: BatchOptions, source: str) -> Path:
    if options.deidentify:
        from reporting.deidentify import keyed_hash

        assert options.deid_key is not None
        name = keyed_hash(options.deid_key, "source", source)
    else:
        name = hashlib.sha256(source.encode()).hexdigest()[:32]
    return options.outdir / STAMPS / f"{name}.json"


def _write_stamp(
    stamp: Path, source: str, analysis: Analysis, outputs: Sequence[str], options: BatchOptions
) -> None:
    data = {
        # The source path may name the patient, so a de-identified stamp leaves it out.
        "source": None if options.deidentify else source,
        "fingerprint": options.fingerprint,
        "study_id": analysis.study.id,
        "outputs": list(outputs),
        # Files the study refers to (curves, a lab map) are found again from the study on re-runs.
        "dependencies": analysis.kinetics is not None
        or analysis.territory_map.name not in BUILT_IN_MAPS,
    }
    write_atomic(stamp, json.dumps(data, indent=1) + "\n")


def _reuse(path: Path, source: str, stamp: Path, options: BatchOptions) -> StudyResult | None:
    """The result of an earlier run when its outputs are newer than the input, else ``None``."""
    try:
        data = json.loads(stamp.read_text(encoding="utf-8"))
        if data.get("fingerprint") != options.fingerprint:
            return None
        input_time = path.stat().st_mtime_ns
        if data.get("dependencies"):
            input_time = max([input_time, *(p.stat().st_mtime_ns for p in _dependencies(path))])
        outputs = [options.outdir / name for name in data["outputs"]]
        if any(p.stat().st_mtime_ns < input_time for p in [stamp, *outputs]):
            return None
        record = options.outdir / f"{data['study_id']}.record.json"
        analysis = Analysis.model_validate_json(record.read_bytes())
    except (OSError, ValueError, KeyError, TypeError, ReportingError):
        return None
    return _result(source, Status.SKIPPED, analysis, data["outputs"])


def _dependencies(path: Path) -> list[Path]:
    """Files named by the study at ``path``: its curve file and a lab territory map."""
    from reporting.load import read_document

    raw = read_document(path)
    found = []
    if isinstance(raw, dict):
        for key in ("perfusion_curves", "territory_map"):
            value = raw.get(key)
            if isinstance(value, str) and value not in BUILT_IN_MAPS:
                found.append(path.parent / value)
    return found


# --- the driver ---------------------------------------------------------------------------------------


def run_batch(
    indir: Path,
    options: BatchOptions,
    *,
    jobs: int = 1,
    studies: Sequence[Path] | None = None,
    progress: ProgressCallback | None = None,
) -> BatchSummary:
    """Process every study under ``indir`` and write the registry, tables and failure list.

    ``studies`` (default :func:`find_studies`) lets a caller size a progress bar first; ``progress``
    is called once per study, in order, as results arrive. Results are identical for any ``jobs``.
    Raises :class:`BatchInterrupted` when a worker dies; finished studies are skipped on a re-run.
    """
    indir = Path(indir)
    paths = list(studies) if studies is not None else find_studies(indir, exclude=options.outdir)
    outdir = options.outdir
    outdir.mkdir(parents=True, exist_ok=True)
    counts = {status: 0 for status in Status}
    seen_ids: dict[str, str] = {}
    _sweep_temporaries(outdir)  # left by a run that was killed outright
    aggregates = _Aggregates(outdir, _file_label(options), redact=options.deidentify)
    try:
        with tables.TableWriter(outdir) as table_writer:
            study_rows: list[tables.Row] = []
            segment_rows: list[tables.Row] = []
            for result in _results(paths, options, indir=indir, jobs=jobs):
                result = _check_duplicate(result, seen_ids, aggregates.label)
                counts[result.status] += 1
                if result.status is Status.FAILED:
                    aggregates.failure(result)
                else:
                    assert result.record_line is not None and result.study_row is not None
                    aggregates.record(result.record_line)
                    study_rows.append(result.study_row)
                    segment_rows.extend(result.segment_rows)
                    if len(study_rows) >= CHUNK_STUDIES:
                        table_writer.append(study_rows, segment_rows)
                        study_rows, segment_rows = [], []
                if progress is not None:
                    progress(result)
            table_writer.append(study_rows, segment_rows)
            written = aggregates.commit() + table_writer.commit()
    except BaseException:
        aggregates.abort()
        _sweep_temporaries(outdir)
        raise
    summary = BatchSummary(
        total=len(paths),
        done=counts[Status.DONE],
        skipped=counts[Status.SKIPPED],
        failed=counts[Status.FAILED],
        written=tuple(written),
    )
    log.info("batch %s: %s", indir, summary.line())
    return summary


def _file_label(options: BatchOptions) -> Callable[[str], str]:
    """How failures.csv names an input file: its relative path, or a keyed hash when de-identifying."""
    if not options.deidentify:
        return lambda source: source
    from reporting.deidentify import keyed_hash

    key = options.deid_key
    assert key is not None
    return lambda source: "F-" + keyed_hash(key, "source", source)


def _check_duplicate(
    result: StudyResult, seen: dict[str, str], label: Callable[[str], str]
) -> StudyResult:
    if result.study_id is None:
        return result
    first = seen.setdefault(result.study_id, result.source)
    if first == result.source:
        return result
    return StudyResult(
        source=result.source,
        status=Status.FAILED,
        problems=(
            Problem(
                "study.id",
                f"study id {result.study_id!r} is also used by {label(first)}; each study needs its own id "
                f"(the files named after it may now hold this study: re-run after fixing)",
            ),
        ),
    )


def _results(
    paths: Sequence[Path], options: BatchOptions, *, indir: Path, jobs: int
) -> Iterator[StudyResult]:
    if jobs <= 1 or len(paths) <= 1:
        for path in paths:
            yield process_study(path, options, indir=indir)
        return
    pending: deque[Future[list[StudyResult]]] = deque()
    executor = ProcessPoolExecutor(max_workers=jobs)
    try:
        queue = (list(paths[i : i + TASK_STUDIES]) for i in range(0, len(paths), TASK_STUDIES))
        for chunk in queue:
            pending.append(executor.submit(_process_chunk, chunk, options, indir))
            if len(pending) >= jobs * IN_FLIGHT_PER_JOB:
                break
        while pending:
            try:
                done = pending.popleft().result()
            except BrokenProcessPool as exc:
                raise BatchInterrupted(
                    "a worker process stopped unexpectedly; the batch was interrupted "
                    "(re-run to finish: completed studies are skipped)"
                ) from exc
            next_chunk = next(queue, None)
            if next_chunk is not None:
                pending.append(executor.submit(_process_chunk, next_chunk, options, indir))
            yield from done
    finally:
        executor.shutdown(wait=True, cancel_futures=True)


def _process_chunk(paths: list[Path], options: BatchOptions, indir: Path) -> list[StudyResult]:
    return [process_study(p, options, indir=indir) for p in paths]


class _Aggregates:
    """``registry.ndjson`` and ``failures.csv`` streamed into temporary files."""

    def __init__(self, outdir: Path, label: Callable[[str], str], *, redact: bool) -> None:
        self.outdir = outdir
        self.label = label
        self.redact = redact
        self.targets: list[tuple[Path, Path]] = []
        self.registry = self._open(REGISTRY)
        self.failures = self._open(FAILURES)
        self.failure_writer = csv.writer(self.failures, lineterminator="\n")
        self.failure_writer.writerow(FAILURE_COLUMNS)

    def _open(self, name: str) -> IO[str]:
        fd, temp = tempfile.mkstemp(prefix=f".{name}.", suffix=".part", dir=self.outdir)
        self.targets.append((Path(temp), self.outdir / name))
        return os.fdopen(fd, "w", encoding="utf-8", newline="")

    def record(self, line: str) -> None:
        self.registry.write(line + "\n")

    def failure(self, result: StudyResult) -> None:
        for problem in result.problems:
            location, message = problem.location, problem.message
            if self.redact:
                location, message = _redacted(location), _redacted(message)
            self.failure_writer.writerow((self.label(result.source), location, message))

    def commit(self) -> list[Path]:
        self.registry.close()
        self.failures.close()
        for temp, final in self.targets:
            os.replace(temp, final)
        return [final for _, final in self.targets]

    def abort(self) -> None:
        for handle in (self.registry, self.failures):
            with contextlib.suppress(Exception):
                handle.close()
        for temp, _ in self.targets:
            with contextlib.suppress(FileNotFoundError):
                temp.unlink()


def _sweep_temporaries(outdir: Path) -> None:
    # A worker killed mid-write leaves its write_atomic temporary (".<name>.<random>.part").
    for folder in (outdir, outdir / STAMPS):
        for temp in folder.glob(".*.part"):
            with contextlib.suppress(OSError):
                temp.unlink()


def describe(result: StudyResult, indir: Path | None = None) -> list[str]:
    """One ``<file>: <location>: <problem>`` line per problem of a failed study.

    The file is given relative to the input folder, or under ``indir`` when it is passed. These
    lines name the file and quote values in full even when de-identifying: they are for the
    operator's screen, not for the extract.
    """
    name = (indir / result.source).as_posix() if indir is not None else result.source
    return [
        ": ".join(part for part in (name, p.location, p.message) if part) for p in result.problems
    ]
