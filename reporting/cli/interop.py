"""Hospital interfaces: ``fhir``, ``hl7`` and ``dicom``, from a study file or a signed stored version."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import click

from reporting.cli.common import (
    emit,
    lab_options,
    released,
    source_options,
    user_errors,
)
from reporting.errors import InputError, InputErrors


@contextmanager
def located(study: Path | None, store_id: str | None, version: int) -> Iterator[None]:
    """Problems with a value an interface cannot carry, located in the study file (or the stored
    version) as every other error is."""
    try:
        yield
    except (InputError, InputErrors) as exc:
        where = str(study) if study is not None else f"study {store_id} version {version}"
        errors = exc if isinstance(exc, InputErrors) else InputErrors([exc])
        raise errors.prefixed(where) from None


@click.command("fhir")
@source_options
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Write the Bundle here (- for stdout, the default).",
)
@lab_options
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

    with user_errors():
        r = released(study, store_id, version_number, db, settings_path, territory_map)
        with located(study, store_id, r.release.version):
            bundle = bundle_json(r.analysis, pdf=r.pdf, release=r.release, settings=r.settings)
        emit(bundle, output)


@click.command("hl7")
@source_options
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Write the message here instead of to stdout.",
)
@lab_options
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

    with user_errors():
        r = released(study, store_id, version_number, db, settings_path, territory_map)
        with located(study, store_id, r.release.version):
            message = oru_message(r.analysis, r.pdf, r.release)
        emit(message, output)


@click.command("dicom")
@source_options
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
@lab_options
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

    with user_errors():
        r = released(
            study, store_id, version_number, db, settings_path, territory_map, new_study=new_study
        )
        with located(study, store_id, r.release.version):
            objects = dicom_objects(
                r.analysis, r.pdf, r.release, settings=r.settings, new_study=new_study
            )
        if objects.warning:
            click.echo(f"Warning: {objects.warning}", err=True)
        for path in write_dicom(r.analysis, objects, outdir):
            click.echo(f"Wrote {path}")
