"""What a batch reports: one :class:`StudyResult` per study and a :class:`BatchSummary` at the end.

Results are plain frozen dataclasses so they cross process boundaries cheaply; :func:`describe`
turns a failed study's problems into the lines the command line shows.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from reporting.errors import ReportingError
from reporting.export import tables
from reporting.vocabulary import Vocabulary


class Status(Vocabulary):
    """Outcome of one study in a batch."""

    DONE = "done"
    """Analysed and its outputs written."""
    SKIPPED = "skipped"
    """Outputs newer than the input and made with the same options: not redone."""
    FAILED = "failed"
    """The study could not be analysed or written; see the problems."""
    IGNORED = "ignored"
    """Not a study but a lab settings file or territory map: nothing written, not a failure."""


@dataclass(frozen=True)
class Problem:
    """One problem of a failed study: where in the file and what."""

    location: str
    message: str


@dataclass(frozen=True)
class StaleOutputs:
    """Files an earlier run wrote for a source that this run did not write again.

    Set when the study failed (all of its earlier files) or now has another id (the files under
    the old id). The driver removes them at the end of the batch unless another study of the batch
    now owns that id, so the output folder never holds a study the registry leaves out.
    """

    study_id: str
    outputs: tuple[str, ...]


@dataclass(frozen=True)
class StudyResult:
    """What :func:`~reporting.batch.process_study` reports for one study (plain data, cheap to pickle)."""

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
    stale: StaleOutputs | None = None
    """Files of an earlier run this run did not write again (see :class:`StaleOutputs`)."""
    label: str | None = None
    """How messages name the file when de-identifying: a keyed hash of ``source`` (``F-…``)."""


@dataclass(frozen=True)
class BatchSummary:
    """Counts of a finished batch and the aggregate files written."""

    total: int
    done: int
    skipped: int
    failed: int
    written: tuple[Path, ...]
    ignored: int = 0
    """Files that are lab settings or territory maps, not studies (not counted in ``total``)."""

    @property
    def ok(self) -> bool:
        """True when no study failed."""
        return self.failed == 0

    def line(self) -> str:
        """``"210 studies: 200 done, 0 skipped, 10 failed"``."""
        return (
            f"{self.total} stud{'y' if self.total == 1 else 'ies'}: {self.done} done, "
            f"{self.skipped} skipped, {self.failed} failed"
        ) + (
            f"; {self.ignored} lab settings or territory map file"
            f"{'' if self.ignored == 1 else 's'} left out (not studies)"
            if self.ignored
            else ""
        )


class BatchInterrupted(ReportingError):
    """The batch stopped before the end (a worker process died); re-run to complete it."""


ProgressCallback = Callable[[StudyResult], None]


def describe(result: StudyResult, indir: Path | None = None) -> list[str]:
    """One ``<file>: <location>: <problem>`` line per problem of a failed study.

    The file is given relative to the input folder, or under ``indir`` when it is passed. When
    de-identifying, the file is its keyed hash (``F-…``) and the problems hold nothing from the
    input (see :mod:`reporting.batch.redact`): these lines end up in logs and terminal scrollback.
    """
    if result.label is not None:
        name = result.label
    else:
        name = (indir / result.source).as_posix() if indir is not None else result.source
    return [
        ": ".join(part for part in (name, p.location, p.message) if part) for p in result.problems
    ]
