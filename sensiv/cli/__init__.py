"""Layer 8, the ``sensiv`` command line: typer commands that parse, call, print and write.

Each command lives in its own module and registers itself on :data:`sensiv.cli.app.app` when
imported; the import order below is the order ``sensiv --help`` lists them.
"""

from sensiv.cli import fit, demo, sweep, prior, run  # noqa: F401  (registers the commands)
from sensiv.cli import calibrate, corrbound, discrete, published  # noqa: F401
from sensiv.cli.app import app, main

__all__ = ["app", "main"]
