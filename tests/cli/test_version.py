"""``sensiv --version`` prints the package version (the one in ``pyproject.toml``)."""

from __future__ import annotations

import tomllib
from pathlib import Path

from typer.testing import CliRunner

from sensiv.cli import app

ROOT = Path(__file__).resolve().parents[2]


def test_version_matches_the_project_metadata():
    declared = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["version"]
    res = CliRunner().invoke(app, ["--version"])
    assert res.exit_code == 0 and res.stdout.strip() == f"sensiv {declared}"
