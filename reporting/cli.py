"""Command line: a thin click client of the library.

Each command parses its options, calls one or two library functions and turns a
:class:`~reporting.errors.ReportingError` into ``Error: <location>: <problem>`` lines on stderr with
exit code 1 (click's usage errors exit 2). Heavy modules are imported inside the commands so that
``segreport --help`` stays quick.
"""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any, TypeVar

import click

from reporting import __version__
from reporting.errors import ReportingError, problems_of

F = TypeVar("F", bound=Callable[..., Any])

CAUTION = (
    "Decision support for qualified clinicians: computed values need physician review; "
    "follow local protocols, product labelling and licensed practice."
)


@contextmanager
def _user_errors() -> Iterator[None]:
    try:
        yield
    except ReportingError as exc:
        for problem in problems_of(exc):
            click.echo(f"Error: {problem}", err=True)
        sys.exit(1)


def _lab_options(func: F) -> F:
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


@click.group(
    context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100},
    epilog=CAUTION,
)
@click.version_option(__version__, prog_name="segreport")
def main() -> None:
    """Turn stress-echo segment scores into a computed analysis record and report.

    A study file (YAML or JSON) holds the reader's wall-motion and perfusion scores per stage;
    segreport computes WMSI per stage and territory, segment responses, perfusion defects, stress
    adequacy and risk findings.
    """


@main.command()
@click.argument("study", type=click.Path(path_type=Path))
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Write the record here instead of to stdout.",
)
@_lab_options
def analyze(
    study: Path, output: Path | None, settings_path: Path | None, territory_map: str | None
) -> None:
    """Validate STUDY and write its analysis record (JSON)."""
    from reporting.analysis import analyze_file
    from reporting.export.record import record_json
    from reporting.files import write_atomic

    with _user_errors():
        text = record_json(
            analyze_file(study, settings_path=settings_path, territory_map=territory_map)
        )
        if output is None:
            click.echo(text, nl=False)
        else:
            write_atomic(output, text)
            click.echo(f"Wrote {output}", err=True)


@main.command()
@click.argument("studies", nargs=-1, required=True, type=click.Path(path_type=Path))
@_lab_options
def validate(
    studies: tuple[Path, ...], settings_path: Path | None, territory_map: str | None
) -> None:
    """Check study files; list every problem with its location (exit 1 if any)."""
    from reporting.analysis import analyze_file

    failed = 0
    for path in studies:
        try:
            analyze_file(path, settings_path=settings_path, territory_map=territory_map)
        except ReportingError as exc:
            failed += 1
            for problem in problems_of(exc):
                click.echo(f"Error: {problem}", err=True)
        else:
            click.echo(f"ok: {path}")
    if failed:
        click.echo(f"{failed} of {len(studies)} file(s) have problems.", err=True)
        sys.exit(1)


@main.command()
@click.option(
    "-o",
    "--output",
    "outdir",
    type=click.Path(file_okay=False, path_type=Path),
    default=Path("segreport-demo"),
    show_default=True,
    help="Folder for the demo studies and their outputs.",
)
def demo(outdir: Path) -> None:
    """Write the invented demo studies and their records (no input needed)."""
    from reporting.demo import write_demo

    with _user_errors():
        for path in write_demo(outdir):
            click.echo(f"Wrote {path}")


@main.command()
@click.option(
    "-o",
    "--output",
    "outdir",
    type=click.Path(file_okay=False, path_type=Path),
    help="Write the schema files into this folder instead of printing the record schema.",
)
def schema(outdir: Path | None) -> None:
    """Print the JSON Schema of the analysis record, or write every schema into a folder."""
    from reporting.export.record import SCHEMAS, record_schema, schema_text
    from reporting.files import write_atomic

    if outdir is None:
        click.echo(schema_text(record_schema()), nl=False)
        return
    for name, build in SCHEMAS.items():
        write_atomic(outdir / name, schema_text(build()))
        click.echo(f"Wrote {outdir / name}")
