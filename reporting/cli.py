"""Command line: a thin click client of the library.

Each command parses its options, calls one or two library functions and turns a
:class:`~reporting.errors.ReportingError` into ``Error: <location>: <problem>`` lines on stderr with
exit code 1 (click's usage errors exit 2). Heavy modules are imported inside the commands so that
``segreport --help`` stays quick.
"""

from __future__ import annotations

import datetime as dt
import io
import os
import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any, TypeVar

import click

from reporting import __version__
from reporting.errors import ReportingError, problems_of
from reporting.store.command import store_group
from reporting.wording import CAUTION_LINE

F = TypeVar("F", bound=Callable[..., Any])

# segreport uses no pydantic plugins; skipping their entry-point scan saves ~20-30 ms per command.
# Set PYDANTIC_DISABLE_PLUGINS to an empty string to scan for plugins anyway.
os.environ.setdefault("PYDANTIC_DISABLE_PLUGINS", "__all__")


@contextmanager
def _user_errors() -> Iterator[None]:
    try:
        yield
    except ReportingError as exc:
        for problem in problems_of(exc):
            click.echo(f"Error: {problem}", err=True)
        sys.exit(1)


_STDOUT_NAMES = frozenset({"-", "/dev/stdout", "/dev/fd/1", "/proc/self/fd/1"})


def _is_stdout(output: Path | None) -> bool:
    """Whether ``-o`` names standard output: none given, ``-``, ``/dev/stdout`` or another name of it."""
    if output is None or str(output) in _STDOUT_NAMES:
        return True
    try:
        target, stdout = os.stat(output), os.fstat(sys.stdout.fileno())
    except (OSError, ValueError, AttributeError, io.UnsupportedOperation):
        return False
    return (target.st_dev, target.st_ino) == (stdout.st_dev, stdout.st_ino)


def _emit(data: str | bytes, output: Path | None) -> None:
    """Print ``data`` when ``output`` is standard output (see :func:`_is_stdout`), else write it
    atomically to ``output`` and say so on stderr."""
    from reporting.files import write_atomic

    if not _is_stdout(output):
        assert output is not None
        write_atomic(output, data)
        click.echo(f"Wrote {output}", err=True)
    elif isinstance(data, bytes):
        stream = click.get_binary_stream("stdout")
        stream.write(data)
        stream.flush()
    else:
        click.echo(data, nl=False)


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


def _source_options(func: F) -> F:
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


def _released(
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


@click.group(
    context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100},
    epilog=CAUTION_LINE,
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
    help="Write the record here (- for stdout, the default).",
)
@_lab_options
def analyze(
    study: Path, output: Path | None, settings_path: Path | None, territory_map: str | None
) -> None:
    """Validate STUDY and write its analysis record (JSON)."""
    from reporting.analysis import analyze_file
    from reporting.export.record import record_json

    with _user_errors():
        text = record_json(
            analyze_file(study, settings_path=settings_path, territory_map=territory_map)
        )
        _emit(text, output)


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
@_lab_options
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

    with _user_errors():
        analysis = analyze_file(study, settings_path=settings_path, territory_map=territory_map)
        if prior_path is not None:
            prior = load_prior(prior_path, settings_path=settings_path, territory_map=None)
            analysis = with_comparison(analysis, prior, location=f"--prior {prior_path}")
        for path in write_report(analysis, outdir, paper=paper, templates_dir=templates_dir):
            click.echo(f"Wrote {path}")


@main.command()
@click.option(
    "--port",
    type=click.IntRange(1, 65535),
    default=8765,
    show_default=True,
    help="Port (on 127.0.0.1 unless --host names another address with --db).",
)
@click.option(
    "--studies",
    "studies_dir",
    type=click.Path(file_okay=False, path_type=Path),
    default=Path("."),
    show_default=True,
    help="Folder of study files, created when missing; drafts go to DIR/.drafts, reports to DIR/reports.",
)
@click.option(
    "--settings",
    "settings_path",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Lab settings file (YAML) overriding the default thresholds.",
)
@click.option(
    "--phrases",
    "phrases_path",
    type=click.Path(dir_okay=False, path_type=Path),
    help="The lab's phrase library (YAML) offered in the impression; default: the lab setting "
    "phrases_file, else the built-in starter set.",
)
@click.option(
    "--db",
    metavar="PATH|URL",
    help="Serve the report store instead of a folder (lab mode: users sign in): a SQLite file or "
    "postgresql+psycopg://… URL. $SEGREPORT_DB does not switch serve to lab mode.",
)
@click.option(
    "--host",
    metavar="ADDR",
    help="With --db: address to listen on [default: 127.0.0.1]; another address needs "
    "--certfile/--keyfile or --behind-proxy, and --allowed-host.",
)
@click.option(
    "--certfile",
    type=click.Path(dir_okay=False, path_type=Path),
    help="With --db: TLS certificate (PEM) to serve https.",
)
@click.option(
    "--keyfile",
    type=click.Path(dir_okay=False, path_type=Path),
    help="With --db: the certificate's private key (PEM).",
)
@click.option(
    "--behind-proxy",
    is_flag=True,
    help="With --db: a TLS proxy in front forwards the requests (needs --trusted-proxy).",
)
@click.option(
    "--trusted-proxy",
    metavar="ADDR",
    help="With --behind-proxy: the proxy's address, the only one whose forwarded headers count.",
)
@click.option(
    "--allowed-host",
    "allowed_hosts",
    multiple=True,
    metavar="NAME",
    help="With --db: a host name users open the page by (repeatable; other Host headers are refused).",
)
@click.pass_context
def serve(
    ctx: click.Context,
    port: int,
    studies_dir: Path,
    settings_path: Path | None,
    phrases_path: Path | None,
    db: str | None,
    host: str | None,
    certfile: Path | None,
    keyfile: Path | None,
    behind_proxy: bool,
    trusted_proxy: str | None,
    allowed_hosts: tuple[str, ...],
) -> None:
    """Score entry in the browser: a local page over a folder at http://127.0.0.1:PORT/, or with
    --db the lab's shared reporting page over the store, with sign-in (Ctrl+C stops)."""
    from reporting.settings import load_settings

    with _user_errors():
        if db is None:
            store_only = {
                "--host": host,
                "--certfile": certfile,
                "--keyfile": keyfile,
                "--behind-proxy": behind_proxy or None,
                "--trusted-proxy": trusted_proxy,
                "--allowed-host": allowed_hosts or None,
            }
            for option, value in store_only.items():
                if value is not None:
                    raise ReportingError(
                        f"{option}: only with --db (the folder page serves this computer only)"
                    )
        elif ctx.get_parameter_source("studies_dir") != click.core.ParameterSource.DEFAULT:
            raise ReportingError("--studies: not with --db (the studies are in the store)")
        settings = load_settings(settings_path)
        if phrases_path is None and settings.phrases_file and settings_path is not None:
            phrases_path = settings_path.parent / settings.phrases_file
        if db is not None:
            from reporting.web.server import serve_store

            serve_store(
                db,
                port=port,
                host=host or "127.0.0.1",
                certfile=certfile,
                keyfile=keyfile,
                behind_proxy=behind_proxy,
                trusted_proxy=trusted_proxy,
                allowed_hosts=allowed_hosts,
                settings=settings,
                phrases_path=phrases_path,
                on_ready=lambda url: click.echo(
                    f"Lab reporting page for the store on {url} (Ctrl+C stops)", err=True
                ),
            )
            return
        from reporting.web import serve as run_server

        run_server(
            studies_dir,
            port=port,
            settings=settings,
            phrases_path=phrases_path,
            on_ready=lambda url: click.echo(
                f"Score entry for {studies_dir.resolve()} on {url} (Ctrl+C stops)", err=True
            ),
        )


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
    """Write the invented demo studies, their records, maps and PDFs (no input needed)."""
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
    with _user_errors():
        for name, build in SCHEMAS.items():
            write_atomic(outdir / name, schema_text(build()))
            click.echo(f"Wrote {outdir / name}")


@main.command()
@click.argument("records", type=click.Path(path_type=Path))
@click.option(
    "--angio",
    "angio_path",
    required=True,
    type=click.Path(dir_okay=False, path_type=Path),
    help="Angiography CSV: study_id, vessel (LAD, LCx, RCA or LM), stenosis_percent.",
)
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Write the review JSON here (- for stdout, the default).",
)
@click.option(
    "--pdf",
    "pdf_path",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Also write the quality PDF here (- for stdout, with -o FILE).",
)
@click.option(
    "--stenosis",
    "stenosis_percent",
    type=click.FloatRange(0, 100, min_open=True),
    help="Diameter stenosis (%) from which a vessel is significant [default: 70].",
)
@click.option(
    "--left-main-stenosis",
    "left_main_percent",
    type=click.FloatRange(0, 100, min_open=True),
    help="Threshold (%) for the left main stem [default: as --stenosis].",
)
@click.option(
    "--from",
    "date_from",
    type=click.DateTime(formats=["%Y-%m-%d"]),
    help="First study date (inclusive).",
)
@click.option(
    "--to",
    "date_to",
    type=click.DateTime(formats=["%Y-%m-%d"]),
    help="Last study date (inclusive).",
)
@click.option(
    "--second-reading",
    type=click.Path(path_type=Path),
    help="Records of a second reader of the same studies: adds reader agreement to the PDF.",
)
def qa(
    records: Path,
    angio_path: Path,
    output: Path | None,
    pdf_path: Path | None,
    stenosis_percent: float | None,
    left_main_percent: float | None,
    date_from: dt.datetime | None,
    date_to: dt.datetime | None,
    second_reading: Path | None,
) -> None:
    """Lab quality review of RECORDS (a folder of records or a registry.ndjson) against angiography."""
    from reporting.qa import review_json, review_pdf_bytes, run_agreement, run_review

    _refuse_two_stdouts(output, pdf_path, "review")

    thresholds = {
        name: value
        for name, value in (
            ("stenosis_percent", stenosis_percent),
            ("left_main_stenosis_percent", left_main_percent),
        )
        if value is not None
    }
    with _user_errors():
        review = run_review(
            records,
            angio_path,
            date_from=date_from.date() if date_from else None,
            date_to=date_to.date() if date_to else None,
            **thresholds,
        )
        agreement = run_agreement(records, second_reading) if second_reading else None
        pdf = review_pdf_bytes(review, agreement) if pdf_path is not None else None
        _emit_json_and_pdf(review_json(review), output, pdf, pdf_path)


def _refuse_two_stdouts(output: Path | None, pdf_path: Path | None, what: str) -> None:
    if pdf_path is not None and _is_stdout(pdf_path) and _is_stdout(output):
        raise click.UsageError(
            f"the {what} JSON and the --pdf cannot both go to stdout; give -o FILE"
        )


def _emit_json_and_pdf(
    text: str, output: Path | None, pdf: bytes | None, pdf_path: Path | None
) -> None:
    """Write the JSON and the optional PDF (both or neither); whichever names stdout is printed."""
    from reporting.files import all_or_nothing, write_atomic

    written = [p for p in (output, pdf_path) if p is not None and not _is_stdout(p)]
    with all_or_nothing(written):
        if pdf is not None and pdf_path in written:
            write_atomic(pdf_path, pdf)
        if output in written:
            write_atomic(output, text)
    if _is_stdout(output):
        _emit(text, None)
    elif pdf is not None and pdf_path not in written:
        _emit(pdf, None)
    for path in written:
        click.echo(f"Wrote {path}", err=True)


@main.command()
@click.argument("records_a", type=click.Path(path_type=Path))
@click.argument("records_b", type=click.Path(path_type=Path))
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Write the agreement JSON here (- for stdout, the default).",
)
@click.option(
    "--pdf",
    "pdf_path",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Also write the agreement as a PDF here.",
)
def agreement(records_a: Path, records_b: Path, output: Path | None, pdf_path: Path | None) -> None:
    """Agreement of two readers: RECORDS_A and RECORDS_B matched by study id (Cohen's kappa)."""
    from reporting.qa import agreement_json, run_agreement
    from reporting.qa.pdf.agreement import agreement_pdf_bytes

    _refuse_two_stdouts(output, pdf_path, "agreement")
    with _user_errors():
        result = run_agreement(records_a, records_b)
        pdf = agreement_pdf_bytes(result) if pdf_path is not None else None
        _emit_json_and_pdf(agreement_json(result), output, pdf, pdf_path)


@main.command()
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

    with _user_errors():
        rows = fit_curve_file(
            curves_file,
            segment_model=int(segment_model) if segment_model else None,
            settings=load_settings(settings_path),
        )
        text = fits_csv_text(rows)
        _emit(text, output)


@main.command()
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
@_lab_options
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

    with _user_errors():
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


@main.command("fhir")
@_source_options
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Write the Bundle here (- for stdout, the default).",
)
@_lab_options
def fhir_bundle(
    study: Path | None,
    store_id: str | None,
    version_number: int | None,
    db: str | None,
    output: Path | None,
    settings_path: Path | None,
    territory_map: str | None,
) -> None:
    """Write STUDY as an HL7 FHIR R4 transaction Bundle (JSON), preliminary (unsigned); with
    --store ID, the signed version (final, or amended/corrected/appended after an amendment).

    Patient, practitioners, the order, the DiagnosticReport with the PDF and its observations.
    """
    from reporting.export.fhir import bundle_json

    with _user_errors():
        r = _released(study, store_id, version_number, db, settings_path, territory_map)
        _emit(bundle_json(r.analysis, pdf=r.pdf, release=r.release, settings=r.settings), output)


@main.command("hl7")
@_source_options
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Write the message here instead of to stdout.",
)
@_lab_options
def hl7_message(
    study: Path | None,
    store_id: str | None,
    version_number: int | None,
    db: str | None,
    output: Path | None,
    settings_path: Path | None,
    territory_map: str | None,
) -> None:
    """Write STUDY as an HL7 v2.5.1 ORU^R01 result message, preliminary (status P); with
    --store ID, the signed version (F, or C after an amendment)."""
    from reporting.interop.hl7 import oru_message

    with _user_errors():
        r = _released(study, store_id, version_number, db, settings_path, territory_map)
        _emit(oru_message(r.analysis, r.pdf, r.release), output)


@main.command("dicom")
@_source_options
@click.option(
    "-o",
    "--output",
    "outdir",
    required=True,
    type=click.Path(file_okay=False, path_type=Path),
    help="Folder for <id>.sr.dcm (Comprehensive SR) and <id>.pdf.dcm (Encapsulated PDF).",
)
@click.option(
    "--new-study",
    is_flag=True,
    help="File the result as a new study when the imaging study's UID is not known (it will not file with the images).",
)
@_lab_options
def dicom(
    study: Path | None,
    store_id: str | None,
    version_number: int | None,
    db: str | None,
    outdir: Path,
    new_study: bool,
    settings_path: Path | None,
    territory_map: str | None,
) -> None:
    """Write STUDY as a DICOM Comprehensive SR and Encapsulated PDF, unverified (unsigned); with
    --store ID, the signed version, verified (a new SR naming its predecessor after an amendment)."""
    from reporting.interop.dicom_files import dicom_objects, write_dicom

    with _user_errors():
        r = _released(
            study, store_id, version_number, db, settings_path, territory_map, new_study=new_study
        )
        objects = dicom_objects(
            r.analysis, r.pdf, r.release, settings=r.settings, new_study=new_study
        )
        if objects.warning:
            click.echo(f"Warning: {objects.warning}", err=True)
        for path in write_dicom(r.analysis, objects, outdir):
            click.echo(f"Wrote {path}")


main.add_command(store_group())  # `segreport store …`, loaded on first use
