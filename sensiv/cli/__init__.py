"""Layer 8, the ``sensiv`` command line: typer commands that parse, call, print and write."""

from sensiv.cli.app import app, main

__all__ = ["app", "main"]
