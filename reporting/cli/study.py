"""Commands on one study: analyze, validate, report, curves; and demo and schema."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from reporting.cli.common import (
    emit,
    lab_options,
    user_errors,
)
from reporting.errors import ReportingError, problems_of


@click.command()
@click.argument("study", type=click.Path(path_type=Path))
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Write the record here (- for stdout, the default).",
)
@lab_options
def analyze(
    study: Path, output: Path | None, settings_path: Path | None, territory_map: str | None
) -> None:
    """Validate STUDY and write its analysis record (JSON)."""
    from reporting.analysis import analyze_file
    from reporting.export.record import record_json

    with user_errors():
        text = record_json(
            analyze_file(study, settings_path=settings_path, territory_map=territory_map)
        )
        emit(text, output)


@click.command()
@click.argument("studies", nargs=-1, required=True, type=click.Path(path_type=Path))
@lab_options
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


@click.command()
@click.argument("study", type=click.Path(path_type=Path))
@click.option(
    "-o",
    "--output",
    "outdir",
    required=True,
    type=click.Path(file_okay=False, path_type=Path),
    help="Folder for the record, the bull's-eye SVG maps and the PDF (named after the study id).",
)
@click.option(
    "--paper",
    type=click.Choice(["A4", "Letter"], case_sensitive=False),
    default="A4",
    show_default=True,
    help="Paper size of the PDF.",
)
@click.option(
    "--templates",
    "templates_dir",
    type=click.Path(exists=True, file_okay=False, path_type=Path),
    help="Lab template folder; its files override the packaged narrative templates.",
)
@click.option(
    "--prior",
    "prior_path",
    type=click.Path(dir_okay=False, path_type=Path),
    help="The patient's prior study (a study file or an analysis record JSON) to compare with.",
)
@lab_options
def report(
    study: Path,
    outdir: Path,
    paper: str,
    templates_dir: Path | None,
    prior_path: Path | None,
    settings_path: Path | None,
    territory_map: str | None,
) -> None:
    """Write the record, bull's-eye maps (SVG) and referring-doctor PDF of STUDY into OUTDIR.

    With --prior, the record and the PDF compare STUDY with the patient's earlier study.
    """
    from reporting.analysis import analyze_file, load_prior
    from reporting.comparison import with_comparison
    from reporting.render import write_report

    with user_errors():
        analysis = analyze_file(study, settings_path=settings_path, territory_map=territory_map)
        if prior_path is not None:
            prior = load_prior(prior_path, settings_path=settings_path, territory_map=None)
            analysis = with_comparison(analysis, prior, location=f"--prior {prior_path}")
        for path in write_report(analysis, outdir, paper=paper, templates_dir=templates_dir):
            click.echo(f"Wrote {path}")


@click.command()
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
    """Write the invented demo studies, their records, maps and PDFs (no input needed)."""
    from reporting.demo import write_demo

    with user_errors():
        for path in write_demo(outdir):
            click.echo(f"Wrote {path}")


@click.command()
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
    with user_errors():
        for name, build in SCHEMAS.items():
            write_atomic(outdir / name, schema_text(build()))
            click.echo(f"Wrote {outdir / name}")


@click.command()
@click.argument("curves_file", metavar="CURVES", type=click.Path(path_type=Path))
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Write the fits (CSV) here (- for stdout, the default).",
)
@click.option(
    "--segment-model",
    type=click.Choice(["16", "17", "18"]),
    help="Segment model of the curve file (default: accept segments 1–18).",
)
@click.option(
    "--settings",
    "settings_path",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Lab settings file (YAML) overriding the default thresholds.",
)
def curves(
    curves_file: Path, output: Path | None, segment_model: str | None, settings_path: Path | None
) -> None:
    """Fit every time-intensity curve in CURVES (CSV) and write one row per fit."""
    from reporting.kinetics import fit_curve_file, fits_csv_text
    from reporting.settings import load_settings

    with user_errors():
        rows = fit_curve_file(
            curves_file,
            segment_model=int(segment_model) if segment_model else None,
            settings=load_settings(settings_path),
        )
        text = fits_csv_text(rows)
        emit(text, output)
