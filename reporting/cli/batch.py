"""``segreport batch``: a folder of studies into per-study outputs, the registry and tables."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from reporting.cli.common import (
    lab_options,
    user_errors,
)


@click.command()
@click.argument("indir", type=click.Path(exists=True, file_okay=False, path_type=Path))
@click.option(
    "-o",
    "--output",
    "outdir",
    required=True,
    type=click.Path(file_okay=False, path_type=Path),
    help="Folder for the per-study files, registry.ndjson, the tables and failures.csv.",
)
@click.option(
    "-j",
    "--jobs",
    type=click.IntRange(min=1),
    default=1,
    show_default=True,
    help="Worker processes (results are identical for any number).",
)
@click.option("--no-pdf", is_flag=True, help="Records and tables only: no PDF reports or maps.")
@click.option(
    "--deidentify",
    is_flag=True,
    help="Remove HIPAA Safe Harbor identifiers and replace ids by keyed hashes (no PDF).",
)
@click.option(
    "--deid-key-file",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Secret key for the hashed ids (default: the SEGREPORT_DEID_KEY environment variable).",
)
@click.option(
    "--keep-text", is_flag=True, help="With --deidentify: keep indication, comments and symptoms."
)
@click.option("--fhir", is_flag=True, help="Also write an HL7 FHIR R4 Bundle per study.")
@click.option("--force", is_flag=True, help="Redo studies whose outputs are already up to date.")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar.")
@lab_options
def batch(
    indir: Path,
    outdir: Path,
    jobs: int,
    no_pdf: bool,
    deidentify: bool,
    deid_key_file: Path | None,
    keep_text: bool,
    fhir: bool,
    force: bool,
    quiet: bool,
    settings_path: Path | None,
    territory_map: str | None,
) -> None:
    """Process every study file (YAML/JSON) under INDIR; one bad file never stops the rest.

    Writes each study's record (and report, FHIR Bundle) named after its id, registry.ndjson,
    studies.csv and segments.csv (and Parquet when pyarrow is installed) and failures.csv.
    Exit code 1 when any study failed.
    """
    from reporting.batch import BatchOptions, StudyResult, describe, find_studies, run_batch

    if (keep_text or deid_key_file) and not deidentify:
        raise click.UsageError("--keep-text and --deid-key-file need --deidentify")
    problems: list[str] = []

    def collect(result: StudyResult) -> None:
        problems.extend(describe(result, indir))

    with user_errors():
        key = None
        if deidentify:
            from reporting.deidentify import load_key

            key = load_key(deid_key_file)
        options = BatchOptions(
            outdir=outdir,
            pdf=not no_pdf,
            fhir=fhir,
            deidentify=deidentify,
            deid_key=key,
            keep_text=keep_text,
            force=force,
            settings_path=settings_path,
            territory_map=territory_map,
        )
        studies = find_studies(indir, exclude=outdir)
        if quiet or not sys.stderr.isatty():
            summary = run_batch(indir, options, jobs=jobs, studies=studies, progress=collect)
        else:
            with click.progressbar(length=len(studies), label="Studies", file=sys.stderr) as bar:

                def tick(result: StudyResult) -> None:
                    collect(result)
                    bar.update(1)

                summary = run_batch(indir, options, jobs=jobs, studies=studies, progress=tick)
    for line in problems:
        click.echo(f"Error: {line}", err=True)
    click.echo(summary.line(), err=True)
    if not summary.ok:
        sys.exit(1)
