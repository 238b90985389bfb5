"""The command line with the specification options: ``--where`` (n_filtered in every data
command's JSON, exit 2 on an unknown column, a type mismatch or a syntax error),
``--categorical``, and the identifier and few-cluster warnings on stderr.

The counts are checked against pandas' own selection of the same rows (reference library:
pandas); the thresholds of the warnings are common practice, no source.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app

runner = CliRunner()
BASE = ("--outcome", "y", "--treatment", "x", "--instrument", "z")
WHERE = "age >= 30 and region != 'west'"


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture(scope="module")
def frame() -> pd.DataFrame:
    rng = np.random.default_rng(5)
    n = 600
    z = rng.normal(size=n)
    x = 0.8 * z + rng.normal(size=n)
    out = pd.DataFrame({"y": 1.0 + 0.5 * x + rng.normal(size=n), "x": x, "z": z,
                        "w": rng.normal(size=n), "age": rng.integers(18, 70, n).astype(float),
                        "region": rng.choice(["north", "east", "west"], n),
                        "code": rng.integers(1, 5, n), "firm": rng.integers(0, 300, n),
                        "g": rng.integers(0, 60, n), "d": rng.integers(0, 2, n),
                        "t": rng.integers(0, 2, n)})
    out.loc[:9, "age"] = np.nan
    return out


@pytest.fixture(scope="module")
def data(frame, tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("specs") / "d.csv"
    frame.to_csv(path, index=False)
    return path


def expected_filtered(frame: pd.DataFrame) -> int:
    return int((~((frame["age"] >= 30) & (frame["region"] != "west"))).sum())


@pytest.mark.parametrize("command,extra", [
    ("fit", ()),
    ("sweep", ("--direct=-0.1:0.1", "--points", "5")),
    ("prior", ("--prior", "normal:0:0.05")),
    ("corrbound", ("--reps", "20", "--seed", "1", "--points", "5")),
    ("calibrate", ("--control", "w")),
])
def test_n_filtered_in_every_data_command(command, extra, data, frame):
    result = invoke(command, data, *BASE, "--where", WHERE, *extra, "--json")
    assert result.exit_code == 0, result.stderr
    document = json.loads(result.stdout)
    assert document["n_filtered"] == expected_filtered(frame)
    assert document["n"] == len(frame) - expected_filtered(frame)
    assert any("row filter" in line for line in document["assumptions"])
    plain = json.loads(invoke(command, data, *BASE, *extra, "--json").stdout)
    assert plain["n_filtered"] == 0 and plain["n"] == len(frame)


def test_discrete_takes_where(data, frame):
    args = ("discrete", data, "--outcome", "d", "--treatment", "t", "--instrument", "code",
            "--reps", "0", "--points", "3", "--json")
    ok = invoke(*args, "--where", "code in [1, 2]")
    assert ok.exit_code == 0, ok.stderr
    document = json.loads(ok.stdout)
    assert document["data"]["n_filtered"] == int((~frame["code"].isin([1, 2])).sum())
    assert document["data"]["n"] == int(frame["code"].isin([1, 2]).sum())


@pytest.mark.parametrize("where,words", [
    ("agee > 3", "row-filter column 'agee' not found"),
    ("region > 'a'", "no order"),
    ("region == 2", "holds text values"),
    ("age == 'old'", "holds numeric values"),
    ("age >= 30 and", "syntax error at the end"),
    ("age => 30", "syntax error at character 5"),
])
def test_bad_filters_exit_2(where, words, data):
    result = invoke("fit", data, *BASE, "--where", where)
    assert result.exit_code == 2
    assert words in result.stderr and "Traceback" not in result.stderr
    assert result.stderr.count("\n") == 1  # one paragraph


def test_categorical_option(data):
    result = invoke("fit", data, *BASE, "--categorical", "code", "--json")
    assert result.exit_code == 0, result.stderr
    document = json.loads(result.stdout)
    assert document["controls"] == ["code[2]", "code[3]", "code[4]"]


def test_identifier_warning_on_stderr_and_in_notes(data):
    result = invoke("fit", data, *BASE, "--control", "firm", "--json")
    assert result.exit_code == 0, result.stderr
    assert "looks like an identifier" in result.stderr
    assert "use --absorb or --categorical" in result.stderr
    assert any("identifier" in note for note in json.loads(result.stdout)["notes"])


def test_few_clusters_warning(data, frame):
    few = invoke("sweep", data, *BASE, "--cluster", "code", "--direct=-0.1:0.1", "--points", "3")
    assert few.exit_code == 0, few.stderr
    assert "few clusters" in few.stderr and "under-cover" in few.stderr
    assert "few clusters" in few.stdout  # the text output carries it too
    many = invoke("fit", data, *BASE, "--cluster", "g", "--json")
    assert "few clusters" not in many.stderr
    assert not any("few clusters" in n for n in json.loads(many.stdout)["notes"])


def test_discrete_where_with_counts_is_refused(tmp_path):
    counts = tmp_path / "c.csv"
    pd.DataFrame({"z": [0, 0, 1, 1], "x": [0, 1, 0, 1], "y": [1, 0, 1, 1],
                  "count": [5, 6, 7, 8]}).to_csv(counts, index=False)
    result = invoke("discrete", counts, "--outcome", "y", "--treatment", "x", "--instrument",
                    "z", "--counts", "--where", "z == 1")
    assert result.exit_code == 2 and "counts table" in result.stderr
