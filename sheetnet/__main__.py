"""``python -m sheetnet`` runs the command line."""

from sheetnet.cli import run

run()
