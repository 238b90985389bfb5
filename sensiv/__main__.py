"""``python -m sensiv`` runs the command line."""

from sensiv.cli.app import main

main()
