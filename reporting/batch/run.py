"""The batch driver: every study of a folder through :func:`process_study`, then the aggregates.

:func:`run_batch` first reads every file's study id (see :mod:`reporting.batch.claims`), then runs
the studies on N worker processes and streams the results, in the sorted order of the input paths
whatever the number of workers, into ``registry.ndjson``, ``studies.csv``, ``segments.csv`` (and
Parquet when pyarrow is importable) and ``failures.csv``. Aggregates go through temporary files
renamed at the end, so an interrupted run leaves no half-written file; an output folder that cannot
be written is one :class:`~reporting.errors.ReportingError`, never a traceback. At the end, the
earlier files of studies that failed (or changed their id) are removed, so the output folder holds
exactly the studies the registry lists.
"""

from __future__ import annotations

import contextlib
import gc
import itertools
import logging
import os
import threading
from collections import deque
from collections.abc import Iterator, Sequence
from concurrent.futures import Future, ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from pathlib import Path

from reporting.batch import folder, redact, stamps, watchdog
from reporting.batch.aggregates import Aggregates
from reporting.batch.claims import Claim, assign, claim_key, read_output_ids
from reporting.batch.options import BatchOptions
from reporting.batch.results import (
    BatchInterrupted,
    BatchSummary,
    ProgressCallback,
    Status,
    StudyResult,
)
from reporting.batch.sources import find_studies, source_name
from reporting.batch.study import process_study
from reporting.errors import OutputError, ReportingError
from reporting.export import tables

log = logging.getLogger(__name__)

CHUNK_STUDIES = 128
"""Studies per table chunk (and Parquet row group); fixed so output bytes never depend on timing."""
TASK_STUDIES = 8
"""Studies per task sent to a worker process."""
ID_TASK_STUDIES = 64
"""Studies per task of the first pass, which only reads ids."""
IN_FLIGHT_PER_JOB = 4
"""Tasks queued per worker: enough to keep workers busy, small enough to bound memory."""


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
    Raises :class:`BatchInterrupted` when a worker dies (finished studies are skipped on a re-run)
    and :class:`~reporting.errors.ReportingError` when the output folder cannot be written.
    """
    indir = Path(indir)
    paths = list(studies) if studies is not None else find_studies(indir, exclude=options.outdir)
    outdir = options.outdir
    claimed = folder.claimed(
        outdir, options.deidentify, options.key_fingerprint, temporaries=(outdir / stamps.STAMPS,)
    )
    with claimed:
        quiet = redact.input_logs_silenced() if options.deidentify else contextlib.nullcontext()
        with quiet:
            summary = _run_locked(indir, paths, options, jobs=jobs, progress=progress)
    if options.deidentify:  # the input folder's name may name a patient
        log.info("batch: %s", summary.line())
    else:
        log.info("batch %s: %s", indir, summary.line())
    return summary


@contextlib.contextmanager
def _start_up_heap_frozen() -> Iterator[None]:
    """Keep the objects alive when the studies start (modules, classes) out of the collector's
    passes.

    A batch creates many short-lived objects per study, and each full collection would walk the
    hundreds of thousands that the imports left behind; frozen before the workers fork, they are
    not walked (or written to, sparing copy-on-write pages) in the workers either, as the Python
    documentation of ``gc.freeze`` advises for a process that forks. They are unfrozen afterwards,
    so a long-running caller collects them again. A caller that froze its own heap (a pre-fork
    server) keeps its freeze: ``gc.unfreeze`` would thaw everything, so nothing is done then.
    pandas and pyarrow load later, in the parent only (:func:`tables.preload_parquet`), and are not
    frozen: the parent's few full collections walk them.
    """
    if gc.get_freeze_count():
        yield
        return
    gc.freeze()
    try:
        yield
    finally:
        gc.unfreeze()


def _run_locked(
    indir: Path,
    paths: Sequence[Path],
    options: BatchOptions,
    *,
    jobs: int,
    progress: ProgressCallback | None,
) -> BatchSummary:
    outdir = options.outdir
    counts = {status: 0 for status in Status}
    produced: set[str] = set()
    stale: list[StudyResult] = []
    try:
        aggregates = Aggregates(outdir, options.file_label)
    except OSError as exc:
        raise _output_error(outdir, exc) from None
    try:
        with tables.TableWriter(outdir) as table_writer, _start_up_heap_frozen():
            study_rows: list[tables.Row] = []
            segment_rows: list[tables.Row] = []
            for result in _results(paths, options, indir=indir, jobs=jobs):
                counts[result.status] += 1
                if result.stale is not None:
                    stale.append(result)
                if result.status is Status.FAILED:
                    aggregates.failure(result)
                elif result.status is Status.IGNORED:
                    pass
                else:
                    assert result.record_line is not None and result.study_row is not None
                    assert result.study_id is not None
                    produced.add(claim_key(result.study_id))
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
    except OSError as exc:
        aggregates.abort()
        _sweep_temporaries(outdir)
        raise _output_error(outdir, exc) from None
    except BaseException:
        aggregates.abort()
        _sweep_temporaries(outdir)
        raise
    _remove_stale(options, stale, produced)
    return BatchSummary(
        total=len(paths) - counts[Status.IGNORED],
        done=counts[Status.DONE],
        skipped=counts[Status.SKIPPED],
        failed=counts[Status.FAILED],
        written=tuple(written),
        ignored=counts[Status.IGNORED],
    )


def _output_error(outdir: Path, exc: OSError) -> ReportingError:
    if exc.filename is None:  # not a file of ours: starting a worker process, for example
        return ReportingError(f"the batch stopped: {exc.strerror or exc}")
    return OutputError(str(outdir), f"cannot write the output folder: {exc.strerror or exc}")


def _remove_stale(options: BatchOptions, results: list[StudyResult], produced: set[str]) -> None:
    # Only now is it known which ids this batch wrote: files under an id another study of the
    # batch now owns are that study's, so they stay.
    for result in results:
        assert result.stale is not None
        if claim_key(result.stale.study_id) not in produced:
            stamps.remove_outputs(options.outdir, result.stale)
        if result.status in (Status.FAILED, Status.IGNORED):
            stamps.remove_stamp(options, result.source)


def _results(
    paths: Sequence[Path], options: BatchOptions, *, indir: Path, jobs: int
) -> Iterator[StudyResult]:
    sources = [source_name(p, indir) for p in paths]
    if jobs <= 1 or len(paths) <= 1:
        claims = assign(zip(sources, read_output_ids(paths, options), strict=True))
        for path, claim in zip(paths, claims, strict=True):
            yield process_study(path, options, indir=indir, claim=claim)
        return
    preload: threading.Thread | None = None
    executor = ProcessPoolExecutor(
        max_workers=jobs, initializer=watchdog.start, initargs=(os.getpid(), options.deidentify)
    )
    try:
        id_tasks = [paths[i : i + ID_TASK_STUDIES] for i in range(0, len(paths), ID_TASK_STUDIES)]
        with _worker_deaths():
            ids = list(executor.map(read_output_ids, id_tasks, itertools.repeat(options)))
        # The workers exist now (they have answered), so this process may start a thread: the
        # table libraries load while the workers analyse the first studies.
        preload = tables.preload_parquet()
        claims = assign(zip(sources, itertools.chain.from_iterable(ids), strict=True))
        queue = (
            list(zip(paths[i : i + TASK_STUDIES], claims[i : i + TASK_STUDIES], strict=True))
            for i in range(0, len(paths), TASK_STUDIES)
        )
        pending: deque[Future[list[StudyResult]]] = deque()
        with _worker_deaths():
            for chunk in queue:
                pending.append(executor.submit(_process_chunk, chunk, options, indir))
                if len(pending) >= jobs * IN_FLIGHT_PER_JOB:
                    break
        while pending:
            # A worker can die between two results: submitting then fails as well as waiting.
            with _worker_deaths():
                done = pending.popleft().result()
                next_chunk = next(queue, None)
                if next_chunk is not None:
                    pending.append(executor.submit(_process_chunk, next_chunk, options, indir))
            yield from done
    finally:
        executor.shutdown(wait=True, cancel_futures=True)
        if preload is not None:
            preload.join()


@contextlib.contextmanager
def _worker_deaths() -> Iterator[None]:
    try:
        yield
    except BrokenProcessPool as exc:
        raise BatchInterrupted(
            "a worker process stopped unexpectedly; the batch was interrupted "
            "(re-run to finish: completed studies are skipped)"
        ) from exc


def _process_chunk(
    items: list[tuple[Path, Claim]], options: BatchOptions, indir: Path
) -> list[StudyResult]:
    return [process_study(p, options, indir=indir, claim=claim) for p, claim in items]


def _sweep_temporaries(outdir: Path) -> None:
    folder.sweep_temporaries(outdir, outdir / stamps.STAMPS)
