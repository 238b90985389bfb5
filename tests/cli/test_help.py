"""What ``--help`` shows: metavars in the trade's words (COLUMN, LOW:HIGH, LAW, FILE, DIR, …)
rather than type names, and one example per command that actually runs (common practice for
command-line tools, no source)."""

from __future__ import annotations

import re
import shlex
from pathlib import Path

import pytest
from typer.testing import CliRunner

from sensiv.cli import app

ROOT = Path(__file__).resolve().parents[2]
COMMANDS = ("fit", "demo", "sweep", "prior", "run", "calibrate", "corrbound", "discrete",
            "published")
TYPE_NAMES = re.compile(r"<(list\[str\]|str|float|int|path)>|\[str\]")


def _help(command: str) -> str:
    res = CliRunner().invoke(app, [command, "--help"], terminal_width=100)
    assert res.exit_code == 0, res.output
    return res.stdout


def _example(text: str) -> list[str]:
    block = text.split("Example (on the invented demo data in examples/):", 1)[1]
    return shlex.split(block.replace("\\\n", " "))[1:]        # drop the leading "sensiv"


@pytest.mark.parametrize("command", COMMANDS)
def test_help_speaks_in_metavars_not_type_names(command):
    options = _help(command).split("Options:", 1)[1].split("Example", 1)[0]
    assert not TYPE_NAMES.search(options), options


def test_metavars_of_the_shared_options():
    text = _help("sweep")
    for fragment in ("--outcome COLUMN", "--direct LOW:HIGH", "--direct-polytope FILE",
                     "--out DIR", "--se classic|robust|cluster", "--level NUMBER",
                     "--points INTEGER", "--where EXPR"):
        assert fragment in text, fragment
    assert "--prior LAW" in _help("prior") and "--prior-file FILE" in _help("prior")


@pytest.mark.parametrize("command", ["fit", "sweep", "prior", "calibrate", "published",
                                     "discrete", "corrbound"])
def test_the_example_in_the_help_runs(command, monkeypatch):
    # demo and run write a whole report bundle; their examples are the README's, run by
    # tests/cli/test_cli.py::test_every_readme_command_runs
    monkeypatch.chdir(ROOT)
    args = _example(_help(command))
    assert args[0] == command
    res = CliRunner().invoke(app, args + ["--json"])
    assert res.exit_code == 0, res.output


@pytest.mark.parametrize("command", ["demo", "run"])
def test_bundle_examples_are_well_formed(command):
    args = _example(_help(command))
    assert args[0] == command and "--out" in args


@pytest.mark.parametrize("command", COMMANDS)
def test_the_one_command_application_helps_as_the_whole(command):
    # The console script builds only the command asked for (cli.app.main); its help and its
    # usage errors must read exactly as the whole application's (common practice, no source).
    from sensiv.cli.app import only, requested_command

    assert requested_command([command, "--help"]) == command
    for args in ([command, "--help"], [command, "--no-such-option"]):
        whole = CliRunner().invoke(app, args, terminal_width=100)
        single = CliRunner().invoke(only(command), args, terminal_width=100)
        assert (single.exit_code, single.output) == (whole.exit_code, whole.output)


def test_requested_command_leaves_the_rest_to_the_whole_application():
    from sensiv.cli.app import requested_command

    for args in ([], ["--help"], ["--version"], ["fti", "--help"]):
        assert requested_command(args) is None
