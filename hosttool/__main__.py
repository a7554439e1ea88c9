"""``python -m hosttool`` runs the command line."""

from hosttool.cli import run

run()
