"""The DuckDB engine's one-scan route for one-way clusters: pass 1 groups by the cluster and
keeps each cluster's moment matrix, pass 2 maps those matrices to the cluster score sums
without reading the data again.  Checked against the engine's two-query route (the same
engine with the route switched off) and against the numpy engine (the issue's contract,
relative 1e-10); the algebra (score sums of bilinear scores are maps of the moment matrices)
is common practice, no source."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app
from sensiv.estimation import cluster_moments
from sensiv.estimation.engines import duckdb_engine

from conftest import assert_same_document, random_frame

pytest.importorskip("duckdb")
runner = CliRunner()
MODEL = ["--outcome", "y", "--treatment", "x", "--instrument", "z1", "--instrument", "z2",
         "--control", "w1", "--control", "sector", "--control", "year", "--cluster", "g",
         "--weight", "wt"]


@pytest.fixture
def sorted_folder(tmp_path):
    """Rows sorted by the large-mean control, so the first rows are not a fair sample."""
    frame = random_frame(n=3000, seed=5).sort_values("w1", kind="stable")
    frame["w1"] = frame["w1"] * 1000.0
    folder = tmp_path / "sorted"
    folder.mkdir()
    for k, rows in enumerate(np.array_split(np.arange(len(frame)), 3)):
        frame.iloc[rows].to_parquet(folder / f"part-{k}.parquet", index=False)
    return folder


def solver_free(document: str) -> tuple[str, float | None]:
    """The document without the optimal weights' trade-off ``λ``, and ``λ`` itself: a conic
    solver's output (Clarabel's tolerance), which moves at 1e-10 when its inputs move at
    rounding level, on every route including numpy against numpy reordered."""
    doc = json.loads(document)
    optimal = doc.get("bias_aware_optimal") or {}
    trade_off = optimal.pop("trade_off", None)
    return json.dumps(doc), trade_off


def assert_same(got: str, want: str) -> None:
    (a, la), (b, lb) = solver_free(got), solver_free(want)
    assert_same_document(a, b)
    assert (la is None) == (lb is None)
    assert la is None or math.isclose(la, lb, rel_tol=1e-8)


def run(*args):
    result = runner.invoke(app, [str(a) for a in args])
    assert result.exit_code == 0, result.output
    return result.stdout


@pytest.mark.parametrize("command", ["fit", "sweep"])
def test_one_scan_route_equals_the_two_query_route_and_numpy(sorted_folder, monkeypatch,
                                                             command):
    extra = ["--direct=-0.1:0.1", "--direct=-0.05:0.05"] if command == "sweep" else []
    numpy_doc = run(command, sorted_folder, *MODEL, *extra, "--json")
    cluster_moments._LAST.clear()
    grouped = run(command, sorted_folder, *MODEL, *extra, "--json", "--engine", "duckdb")
    assert cluster_moments._LAST, "the one-scan route was not taken"
    monkeypatch.setattr(duckdb_engine, "_sample_shift", lambda plan: None)
    cluster_moments._LAST.clear()
    two_query = run(command, sorted_folder, *MODEL, *extra, "--json", "--engine", "duckdb")
    assert not cluster_moments._LAST
    assert_same(grouped, two_query)
    assert_same(grouped, numpy_doc)


def test_one_scan_route_keeps_the_checks(sorted_folder):
    frame = random_frame(n=600, seed=9)
    frame.loc[17, "w1"] = np.inf
    bad = sorted_folder.parent / "bad.parquet"
    frame.to_parquet(bad, index=False)
    outputs = [runner.invoke(app, ["fit", str(bad), *MODEL, "--engine", engine])
               for engine in ("numpy", "duckdb")]
    assert [o.exit_code for o in outputs] == [2, 2]
    assert all("'w1'" in o.output and "infinite" in o.output for o in outputs)


def test_nan_stored_as_nan_takes_the_full_checks(tmp_path, monkeypatch):
    """A float NaN kept as NaN in the file (not as NULL, which pandas writes): the quick
    checks see it and hand over to the full checks, which drop the row as the numpy path
    does."""
    pa = pytest.importorskip("pyarrow")
    import pyarrow.parquet as pq

    frame = random_frame(n=800, seed=3).dropna()
    frame.loc[frame.index[:7], "z2"] = np.nan
    table = pa.table({c: pa.array(frame[c].to_numpy(), from_pandas=False) for c in frame})
    assert table.column("z2").null_count == 0
    path = tmp_path / "nan.parquet"
    pq.write_table(table, path)
    cluster_moments._LAST.clear()
    got = run("fit", path, *MODEL, "--json", "--engine", "duckdb")
    assert not cluster_moments._LAST          # the quick route declined
    assert_same(got, run("fit", path, *MODEL, "--json"))
    assert json.loads(got)["n_dropped"] == 7


@pytest.fixture
def clean_folder(tmp_path):
    """The sorted design without a missing value: the checks come from the moment sums."""
    frame = random_frame(n=3000, seed=5).dropna().sort_values("w1", kind="stable")
    folder = tmp_path / "clean"
    folder.mkdir()
    for k, rows in enumerate(np.array_split(np.arange(len(frame)), 3)):
        frame.iloc[rows].to_parquet(folder / f"part-{k}.parquet", index=False)
    return folder


def test_clean_rows_settle_the_checks_from_the_sums(clean_folder, monkeypatch):
    def no_second_scan(plan):
        raise AssertionError("a kept row was taken for one with a missing value")

    monkeypatch.setattr(duckdb_engine, "quick_row", no_second_scan)
    cluster_moments._LAST.clear()
    ranges = ["--direct=-0.1:0.1", "--direct=-0.05:0.05"]
    got = run("sweep", clean_folder, *MODEL, *ranges, "--json", "--engine", "duckdb")
    assert cluster_moments._LAST, "the one-scan route was not taken"
    assert_same(got, run("sweep", clean_folder, *MODEL, *ranges, "--json"))


def _with(frame, column, values):
    frame = frame.copy()
    frame[column] = values
    return frame


@pytest.mark.parametrize("change", [
    lambda f: _with(f, "w1", np.where(np.arange(len(f)) == 40, 3e150, f["w1"])),   # too large
    lambda f: _with(f, "z2", f["z2"] * 1e-160),                                     # too small
    lambda f: _with(f, "wt", np.where(np.arange(len(f)) == 7, 0.0, f["wt"])),       # zero weight
    lambda f: _with(f, "wt", np.where(np.arange(len(f)) == 9, -1.0, f["wt"])),      # negative
    lambda f: _with(f, "y", np.where(np.arange(len(f)) == 3, np.inf, f["y"])),      # infinite
], ids=["too-large", "too-small", "zero-weight", "negative-weight", "infinite"])
def test_checks_from_the_sums_give_the_full_checks_messages(tmp_path, monkeypatch, change):
    """Where the sums cannot settle a check, the full checks name the problem: the message is
    the two-query route's (which runs the full checks first), and the numpy path refuses the
    same column (it also names the data row)."""
    path = tmp_path / "bad.parquet"
    change(random_frame(n=900, seed=4).dropna().reset_index(drop=True)).to_parquet(path)
    args = ["fit", str(path), *MODEL]
    numpy_out = runner.invoke(app, args)
    one_scan = runner.invoke(app, [*args, "--engine", "duckdb"])
    monkeypatch.setattr(duckdb_engine, "_sample_shift", lambda plan: None)
    two_query = runner.invoke(app, [*args, "--engine", "duckdb"])
    assert [o.exit_code for o in (numpy_out, one_scan, two_query)] == [2, 2, 2]
    assert one_scan.output == two_query.output
    named = one_scan.output.split(" in ")[0]          # "error: <role> '<column>'"
    assert numpy_out.output.startswith(named), (numpy_out.output, named)


def test_large_but_valid_magnitudes_pass_on_either_route(tmp_path):
    """Values of 1e140 in size: the sums' upper bound may not settle the size check, the full
    checks then do; the numbers equal the numpy engine's."""
    frame = random_frame(n=900, seed=6).dropna()
    frame["w1"] = frame["w1"] * 1e137
    path = tmp_path / "large.parquet"
    frame.to_parquet(path)
    got = run("fit", path, *MODEL, "--json", "--engine", "duckdb")
    assert_same(got, run("fit", path, *MODEL, "--json"))
