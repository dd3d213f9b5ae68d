"""``python -m refdb`` runs the command line."""

from refdb.cli.app import main

main()
