"""Lab quality commands: ``qa`` (against angiography) and ``agreement`` (between readers)."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import click

from reporting.cli.common import (
    emit,
    is_stdout,
    user_errors,
)


@click.command()
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
    with user_errors():
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
    if pdf_path is not None and is_stdout(pdf_path) and is_stdout(output):
        raise click.UsageError(
            f"the {what} JSON and the --pdf cannot both go to stdout; give -o FILE"
        )


def _emit_json_and_pdf(
    text: str, output: Path | None, pdf: bytes | None, pdf_path: Path | None
) -> None:
    """Write the JSON and the optional PDF (both or neither); whichever names stdout is printed."""
    from reporting.files import all_or_nothing, write_atomic

    written = [p for p in (output, pdf_path) if p is not None and not is_stdout(p)]
    with all_or_nothing(written):
        if pdf is not None and pdf_path in written:
            write_atomic(pdf_path, pdf)
        if output in written:
            write_atomic(output, text)
    if is_stdout(output):
        emit(text, None)
    elif pdf is not None and pdf_path not in written:
        emit(pdf, None)
    for path in written:
        click.echo(f"Wrote {path}", err=True)


@click.command()
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
    with user_errors():
        result = run_agreement(records_a, records_b)
        pdf = agreement_pdf_bytes(result) if pdf_path is not None else None
        _emit_json_and_pdf(agreement_json(result), output, pdf, pdf_path)
