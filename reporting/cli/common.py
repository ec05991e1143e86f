"""What the commands share: the error printer, standard-output handling and common options."""

from __future__ import annotations

import io
import os
import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any, TypeVar

import click

from reporting.errors import ReportingError, UsageError, problems_of

F = TypeVar("F", bound=Callable[..., Any])


@contextmanager
def user_errors() -> Iterator[None]:
    try:
        yield
    except ReportingError as exc:
        problems = problems_of(exc)
        for problem in problems:
            click.echo(f"Error: {problem}", err=True)
        sys.exit(2 if all(isinstance(p, UsageError) for p in problems) else 1)


STDOUT_NAMES = frozenset({"-", "/dev/stdout", "/dev/fd/1", "/proc/self/fd/1"})


def is_stdout(output: Path | None) -> bool:
    """Whether ``-o`` names standard output: none given, ``-``, ``/dev/stdout`` or another name of it."""
    if output is None or str(output) in STDOUT_NAMES:
        return True
    try:
        target, stdout = os.stat(output), os.fstat(sys.stdout.fileno())
    except (OSError, ValueError, AttributeError, io.UnsupportedOperation):
        return False
    return (target.st_dev, target.st_ino) == (stdout.st_dev, stdout.st_ino)


def emit(data: str | bytes, output: Path | None) -> None:
    """Print ``data`` when ``output`` is standard output (see :func:`is_stdout`), else write it
    atomically to ``output`` and say so on stderr."""
    from reporting.files import write_atomic

    if not is_stdout(output):
        assert output is not None
        write_atomic(output, data)
        click.echo(f"Wrote {output}", err=True)
    elif isinstance(data, bytes):
        stream = click.get_binary_stream("stdout")
        stream.write(data)
        stream.flush()
    else:
        click.echo(data, nl=False)


def lab_options(func: F) -> F:
    func = click.option(
        "--settings",
        "settings_path",
        type=click.Path(dir_okay=False, path_type=Path),
        help="Lab settings file (YAML) overriding the default thresholds.",
    )(func)
    func = click.option(
        "--territory-map",
        metavar="NAME|FILE",
        help="Territory map: standard, left_dominant or a lab map YAML file (overrides the study's own choice).",
    )(func)
    return func


def source_options(func: F) -> F:
    """``STUDY`` or ``--store ID [--version N] [--db URL]``: a study file, or a signed stored version."""
    func = click.option(
        "--db",
        metavar="PATH|URL",
        help="Store for --store: a SQLite file or postgresql+psycopg://… URL [default: $SEGREPORT_DB, else ./segreport.db].",
    )(func)
    func = click.option(
        "--version",
        "version_number",
        type=click.IntRange(min=1),
        help="With --store: the signed version to send [default: the latest].",
    )(func)
    func = click.option(
        "--store",
        "store_id",
        metavar="ID",
        help="Export the signed version of study ID from the report store instead of a STUDY file.",
    )(func)
    return click.argument("study", required=False, type=click.Path(path_type=Path))(func)


def released(
    study: Path | None,
    store_id: str | None,
    version_number: int | None,
    db: str | None,
    settings_path: Path | None,
    territory_map: str | None,
    *,
    new_study: bool = False,
) -> Any:
    """The analysis, PDF, release and settings to export: from STUDY, or from the store."""
    from reporting.store.source import released_from

    return released_from(
        study,
        store_id=store_id,
        version=version_number,
        db=db,
        settings_path=settings_path,
        territory_map=territory_map,
        new_study=new_study,
    )
