"""``python -m hosttool`` runs the command line."""

from hosttool.cli import main

main(prog_name="hosttool")
