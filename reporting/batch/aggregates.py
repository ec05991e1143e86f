"""``registry.ndjson`` and ``failures.csv``: streamed into temporary files, renamed at the end.

Nothing appears under its final name before :meth:`Aggregates.commit`, so an interrupted batch
leaves no half-written aggregate. When de-identifying, failures name files by a keyed hash, and
their problems were already rebuilt without any input value (see :mod:`reporting.batch.redact`).
"""

from __future__ import annotations

import contextlib
import csv
import os
from collections.abc import Callable
from pathlib import Path
from typing import IO

from reporting.batch.results import StudyResult
from reporting.files import temporary_beside

REGISTRY = "registry.ndjson"
FAILURES = "failures.csv"
FAILURE_COLUMNS = ("file", "location", "message")


class Aggregates:
    """The registry and the failure list of one batch run."""

    def __init__(self, outdir: Path, label: Callable[[str], str]) -> None:
        self.outdir = outdir
        self.label = label
        self.targets: list[tuple[Path, Path]] = []
        self.handles: list[IO[str]] = []
        try:
            self.registry = self._open(REGISTRY)
            self.failures = self._open(FAILURES)
        except BaseException:
            self.abort()
            raise
        self.failure_writer = csv.writer(self.failures, lineterminator="\n")
        self.failure_writer.writerow(FAILURE_COLUMNS)

    def _open(self, name: str) -> IO[str]:
        fd, temp = temporary_beside(self.outdir / name)
        self.targets.append((temp, self.outdir / name))
        handle = os.fdopen(fd, "w", encoding="utf-8", newline="")
        self.handles.append(handle)
        return handle

    def record(self, line: str) -> None:
        """Add one study's record line to the registry."""
        self.registry.write(line + "\n")

    def failure(self, result: StudyResult) -> None:
        """Add one row per problem of a failed study."""
        name = result.label if result.label is not None else self.label(result.source)
        for problem in result.problems:
            self.failure_writer.writerow((name, problem.location, problem.message))

    def commit(self) -> list[Path]:
        """Close the files and move them to their final names; return those names."""
        for handle in self.handles:
            handle.close()
        for temp, final in self.targets:
            os.replace(temp, final)
        return [final for _, final in self.targets]

    def abort(self) -> None:
        """Close and delete the temporary files."""
        for handle in self.handles:
            with contextlib.suppress(Exception):
                handle.close()
        for temp, _ in self.targets:
            with contextlib.suppress(FileNotFoundError):
                temp.unlink()
