"""``python -m sensiv.cli`` runs the command line."""

from sensiv.cli import main

main()
