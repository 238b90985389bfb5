"""Shared CLI helpers: the --out check before any work and the usage-error format.

Common practice, no source.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app
from sensiv.cli.options import check_out
from sensiv.core.errors import InputError

runner = CliRunner()


def test_writable_destinations_pass(tmp_path):
    check_out(None)
    check_out(tmp_path / "new" / "deeper")
    (tmp_path / "existing").mkdir()
    check_out(tmp_path / "existing")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["existing"]  # the probe is removed


@pytest.mark.parametrize("make, fragment", [
    (lambda d: d / "file.txt", "existing file"),
    (lambda d: d / "file.txt" / "sub", "is a file"),
    (lambda d: d / ("n" * 300), "shorter name"),
])
def test_unwritable_destinations_are_refused(tmp_path, make, fragment):
    (tmp_path / "file.txt").write_text("keep")
    with pytest.raises(InputError, match=fragment):
        check_out(make(tmp_path))


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0,
                    reason="the superuser may write into read-only folders")
def test_read_only_parent_is_refused(tmp_path):
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    try:
        with pytest.raises(InputError, match="cannot write"):
            check_out(locked / "out")
    finally:
        locked.chmod(0o755)


def test_out_checked_before_any_work(tmp_path):
    # no data file exists: the --out problem is reported first, before the data are read
    (tmp_path / "file.txt").write_text("keep")
    result = runner.invoke(app, ["fit", str(tmp_path / "none.csv"), "--outcome", "y",
                                 "--treatment", "x", "--instrument", "z", "--out",
                                 str(tmp_path / "file.txt")])
    assert result.exit_code == 2
    assert "existing file" in result.stderr
    assert (tmp_path / "file.txt").read_text() == "keep"


def test_empty_out_is_refused(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    result = runner.invoke(app, ["published", "--estimate", "1", "--se", "0.2",
                                 "--first-stage", "1", "--first-stage-f", "20",
                                 "--direct=0:0.1", "--out", ""])
    assert result.exit_code == 2
    assert result.stderr.startswith("error: ") and "empty" in result.stderr
    assert list(Path(tmp_path).iterdir()) == []


@pytest.mark.parametrize("args, fragment", [
    (["fit", "d.csv", "--outcome", "y"], "missing option '--treatment'"),
    (["fit", "d.csv", "--outcome", "y", "--treatment", "x", "--instrument", "z", "--level",
      "abc"], "'--level'"),
    (["frobnicate"], "no such command"),
])
def test_usage_errors_are_one_paragraph_in_sensivs_format(args, fragment):
    result = runner.invoke(app, args)
    assert result.exit_code == 2
    assert result.stdout == ""
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), result.stderr
    assert fragment in lines[0] and "--help" in lines[0]
    assert "Usage:" not in result.stderr


def test_help_lists_the_maxima():
    for command, fragment in (("sweep", "10,001"), ("prior", "10,000,000"),
                              ("corrbound", "100,000"), ("published", "10,001")):
        result = runner.invoke(app, [command, "--help"])
        assert result.exit_code == 0
        assert fragment in " ".join(result.stdout.split()), command
