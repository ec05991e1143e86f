"""``python -m reporting`` runs the command line."""

from reporting.cli import main

main(prog_name="segreport")
