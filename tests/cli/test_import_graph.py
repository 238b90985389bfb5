"""``--help`` of every command imports none of the heavy numerical libraries.

Common practice, no source: a command line should answer ``--help`` without loading what only
the computations need.  Each command's help runs in a fresh interpreter; the modules loaded by
then are read from ``sys.modules``.  pydantic is checked too: typer imports it only to coerce
an option's value, and ``cli.app.SensivGroup.get_help_option`` keeps the unused help flag from
being coerced.
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

HEAVY = ("pandas", "scipy", "cvxpy", "matplotlib", "pyarrow", "statsmodels", "pydantic")
COMMANDS = ("fit", "sweep", "prior", "corrbound", "discrete", "published", "calibrate", "run",
            "demo")

PROBE = """
import contextlib, io, json, sys
from sensiv.cli.app import main
sys.argv = ["sensiv", *{args!r}]
out = io.StringIO()
with contextlib.redirect_stdout(out):
    try:
        main()
    except SystemExit:
        pass
print(json.dumps({{"modules": sorted(m for m in sys.modules if "." not in m),
                  "help": "Usage" in out.getvalue() and "--help" in out.getvalue()}}))
"""


@pytest.mark.parametrize("args", [("--help",), *((c, "--help") for c in COMMANDS)])
def test_help_loads_no_heavy_library(args):
    done = subprocess.run([sys.executable, "-c", PROBE.format(args=list(args))],
                          capture_output=True, text=True, check=True)
    report = json.loads(done.stdout.strip().splitlines()[-1])
    loaded = set(report["modules"])
    assert report["help"]               # the probe did print the command's help
    assert not loaded & set(HEAVY), sorted(loaded & set(HEAVY))
