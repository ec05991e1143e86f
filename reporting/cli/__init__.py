"""Command line: a thin click client of the library.

Each command parses its options, calls one or two library functions and turns a
:class:`~reporting.errors.ReportingError` into ``Error: <location>: <problem>`` lines on stderr with
exit code 1 (click's usage errors exit 2). Heavy modules are imported inside the commands so that
``segreport --help`` stays quick. The commands live by subject in this package's modules.
"""

from __future__ import annotations

import os

import click

from reporting import __version__
from reporting.wording import CAUTION_LINE

# segreport uses no pydantic plugins; skipping their entry-point scan saves ~20-30 ms per command.
# Set PYDANTIC_DISABLE_PLUGINS to an empty string to scan for plugins anyway.
os.environ.setdefault("PYDANTIC_DISABLE_PLUGINS", "__all__")

from reporting.cli import batch, interop, quality, serve, study
from reporting.store.command import store_group


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


for command in (
    study.analyze,
    study.validate,
    study.report,
    study.curves,
    study.demo,
    study.schema,
    serve.serve,
    quality.qa,
    quality.agreement,
    batch.batch,
    interop.fhir_bundle,
    interop.hl7_message,
    interop.dicom,
):
    main.add_command(command)
main.add_command(store_group())  # `segreport store …`, loaded on first use
