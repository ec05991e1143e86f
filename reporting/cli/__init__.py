"""Command line: a thin click client of the library.

Each command parses its options, calls one or two library functions and turns a
:class:`~reporting.errors.ReportingError` into ``Error: <location>: <problem>`` lines on stderr with
exit code 1 (click's usage errors exit 2). Heavy modules are imported inside the commands so that
``segreport --help`` stays quick. The commands live by subject in this package's modules, and a
command's module is imported only when that command runs (or when the help lists them all).
"""

from __future__ import annotations

import importlib
import os

import click

from reporting import __version__
from reporting.wording import CAUTION_LINE

# segreport uses no pydantic plugins; skipping their entry-point scan saves ~20-30 ms per command.
# Set PYDANTIC_DISABLE_PLUGINS to an empty string to scan for plugins anyway.
os.environ.setdefault("PYDANTIC_DISABLE_PLUGINS", "__all__")

from reporting.store.command import store_group

# command name -> (module, attribute); see _Commands
COMMANDS: dict[str, tuple[str, str]] = {
    "analyze": ("reporting.cli.study", "analyze"),
    "validate": ("reporting.cli.study", "validate"),
    "report": ("reporting.cli.study", "report"),
    "curves": ("reporting.cli.study", "curves"),
    "demo": ("reporting.cli.study", "demo"),
    "schema": ("reporting.cli.study", "schema"),
    "serve": ("reporting.cli.serve", "serve"),
    "qa": ("reporting.cli.quality", "qa"),
    "agreement": ("reporting.cli.quality", "agreement"),
    "batch": ("reporting.cli.batch", "batch"),
    "fhir": ("reporting.cli.interop", "fhir_bundle"),
    "hl7": ("reporting.cli.interop", "hl7_message"),
    "dicom": ("reporting.cli.interop", "dicom"),
}


class _Commands(click.Group):
    """The top-level group; a command in :data:`COMMANDS` is imported when first looked up.

    One `segreport analyze` then loads the study commands only, not the batch, server, quality and
    interface modules beside them (a few milliseconds of every run).
    """

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted({*self.commands, *COMMANDS})

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        if cmd_name not in self.commands and cmd_name in COMMANDS:
            module, attribute = COMMANDS[cmd_name]
            command = getattr(importlib.import_module(module), attribute)
            assert isinstance(command, click.Command)
            self.add_command(command, cmd_name)
        return super().get_command(ctx, cmd_name)

    def resolve_command(
        self, ctx: click.Context, args: list[str]
    ) -> tuple[str | None, click.Command | None, list[str]]:
        if args and args[0] not in self.commands and args[0] not in COMMANDS:
            for name in COMMANDS:  # an unknown name: load them all, so click can suggest one
                self.get_command(ctx, name)
        return super().resolve_command(ctx, args)


@click.group(
    cls=_Commands,
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


main.add_command(store_group())  # `segreport store …`, loaded on first use
