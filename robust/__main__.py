"""``python -m robust`` runs the command line."""

from robust.cli import main_entry

main_entry()
