"""Batch processing: every study file under a folder, per-study outputs, a registry and tables.

One concept per module:

- :mod:`~reporting.batch.options` — :class:`BatchOptions`, what a batch writes;
- :mod:`~reporting.batch.sources` — :func:`find_studies`, which files are studies;
- :mod:`~reporting.batch.claims` — study ids claimed in input order before anything is written,
  so two files with one id never overwrite each other's files;
- :mod:`~reporting.batch.study` — :func:`process_study`, the pure per-study step;
- :mod:`~reporting.batch.stamps` — re-run bookkeeping: skip what is up to date, remove what is stale;
- :mod:`~reporting.batch.aggregates` — ``registry.ndjson`` and ``failures.csv``;
- :mod:`~reporting.batch.run` — :func:`run_batch`, the driver and its worker pool;
- :mod:`~reporting.batch.results` — :class:`StudyResult`, :class:`BatchSummary`, :func:`describe`.
"""

from __future__ import annotations

from reporting.batch.options import BatchOptions
from reporting.batch.results import (
    BatchInterrupted,
    BatchSummary,
    Problem,
    ProgressCallback,
    StaleOutputs,
    Status,
    StudyResult,
    describe,
)
from reporting.batch.run import run_batch
from reporting.batch.sources import find_studies
from reporting.batch.study import process_study, record_text, registry_line

__all__ = [
    "BatchInterrupted",
    "BatchOptions",
    "BatchSummary",
    "Problem",
    "ProgressCallback",
    "StaleOutputs",
    "Status",
    "StudyResult",
    "describe",
    "find_studies",
    "process_study",
    "record_text",
    "registry_line",
    "run_batch",
]
