"""``python -m sensiv`` runs the command line."""

from sensiv.cli import main

main()
